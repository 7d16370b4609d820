-- serialized_blocks: per (lot_id, block), how often the block ran on the sites of a
-- touchdown one after another because each site waited for the one before — the
-- signature of a shared instrument in the timing markers. A site waited when it sat idle
-- after its own previous block (more than 0.1 ms) and started as another site's run of
-- this block ended (within 0.1 ms). A touchdown counts as serialised for the block when
-- it ran on two or more sites and every site after the first waited. is_serialized: in at
-- least 90 % of those touchdowns. mean_wait_ms: the mean idle time of the waiting sites.
-- Key: (lot_id, block).
-- materialized: lot
with

mt as (
    select * from marker_times
),

ordered as (
    select
        *,
        lag(end_ms) over (partition by file_id, touchdown, block order by start_ms, site)
            as other_end_ms,
        lag(end_ms) over (partition by file_id, touchdown, head, site order by start_ms)
            as own_prev_end_ms
    from mt
),

flagged as (
    select
        *,
        other_end_ms is not null
            and start_ms - coalesce(own_prev_end_ms, 0) > 0.1
            and abs(start_ms - other_end_ms) <= 0.1 as waited,
        start_ms - coalesce(own_prev_end_ms, 0) as idle_ms
    from ordered
),

per_touchdown as (
    select
        lot_id, file_id, touchdown, block,
        count(*) as sites,
        bool_and(waited) filter (where other_end_ms is not null) as serial,
        avg(idle_ms) filter (where waited) as wait_ms
    from flagged
    group by lot_id, file_id, touchdown, block
),

final as (
    select
        lot_id,
        block,
        count(*) as touchdowns,
        avg(coalesce(serial, false)::integer) as serialized_share,
        avg(coalesce(serial, false)::integer) >= 0.9 as is_serialized,
        avg(wait_ms) as mean_wait_ms
    from per_touchdown
    where sites >= 2
    group by lot_id, block
)

select * from final
