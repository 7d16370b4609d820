-- reconciliation: per (lot_id, site), the mean part time the log records (PRR.TEST_T, or
-- the timing CSV's test_time_ms) against the mean time per part attributed to blocks by
-- the lot's best timing source (block_times: each block's total over all parts, so blocks
-- that only some parts ran count as often as they ran). unattributed_ms is what no block
-- accounts for: per-part overhead, waits for shared instruments, handler handshakes; for
-- the estimate source it is the fitted per-part overhead. site null = pooled.
-- Key: (lot_id, site).
-- materialized: lot
with

parts as (
    select lot_id, site, avg(test_time_ms) as part_ms, count(*) as parts
    from parts
    where test_time_ms is not null
    group by grouping sets ((lot_id, site), (lot_id))
),

attributed as (
    select b.lot_id, b.site, any_value(b.method) as method,
           sum(b.total_ms) / any_value(p.parts) as attributed_ms
    from block_times as b
    join parts as p on p.lot_id = b.lot_id and p.site is not distinct from b.site
    where b.block <> 'overhead'
    group by b.lot_id, b.site
),

pooled_only as (
    select lot_id, method, attributed_ms from attributed where site is null
),

final as (
    select
        p.lot_id,
        p.site,
        p.parts,
        coalesce(a.method, po.method) as method,
        p.part_ms,
        coalesce(a.attributed_ms, po.attributed_ms) as attributed_ms,
        p.part_ms - coalesce(a.attributed_ms, po.attributed_ms) as unattributed_ms,
        100.0 * (p.part_ms - coalesce(a.attributed_ms, po.attributed_ms)) / nullif(p.part_ms, 0)
            as unattributed_pct
    from parts as p
    left join attributed as a on a.lot_id = p.lot_id and a.site is not distinct from p.site
    left join pooled_only as po on po.lot_id = p.lot_id
)

select * from final
