-- reconciliation: per (lot_id, site), the part time the log records (PRR.TEST_T, or the
-- timing CSV's test_time_ms) against the time attributed to blocks by the lot's best
-- timing source (block_times). unattributed_ms is what no block accounts for: per-part
-- overhead, waits for shared instruments, handler handshakes. site null = pooled.
-- Key: (lot_id, site).
with

parts as (
    select lot_id, site, avg(test_time_ms) as part_ms, count(*) as parts
    from parts
    where test_time_ms is not null
    group by grouping sets ((lot_id, site), (lot_id))
),

attributed as (
    select lot_id, site, any_value(method) as method, sum(mean_ms) as attributed_ms
    from block_times
    group by lot_id, site
),

pooled_only as (
    select lot_id, any_value(method) as method, sum(mean_ms) as attributed_ms
    from block_times where site is null group by lot_id
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
