-- block_times_all: every timing source's view of each block, so sources can be compared.
-- One row per (lot_id, block, site, method); site null = pooled over sites. method:
--   marker   DTR 'TT' timing markers (exact, per part)      -> marker_times
--   csv      the timing CSV (exact, per part)                 -> csv_times
--   tsr      TSR TEST_TIM x EXEC_CNT per block / parts        -> tsr_times (means only)
--   estimate NNLS on PRR.TEST_T against the blocks each part ran (block_estimates,
--            with bootstrap confidence intervals and identifiability; group_* name the
--            blocks it can only time together, and their total)
-- share_pct: the block's total time over the total part time (PRR.TEST_T, or the CSV's
-- test_time_ms) of the same lot and site: its share of tester time, also when it ran on
-- only some parts (stop-on-fail). method_rank orders the sources best first; block_times keeps
-- the best one per lot.
-- materialized: lot
with

marker_rows as (
    select lot_id, block, site, part_index, file_id, duration_ms
    from marker_times where part_index is not null
),

csv_rows as (
    select lot_id, block, site, part_id, file_id, duration_ms from csv_times
),

estimates as (
    select * from block_estimates
),

part_time as (
    select lot_id, site, sum(test_time_ms) as part_total_ms from parts
    group by grouping sets ((lot_id, site), (lot_id))
),

per_part as (
    select lot_id, block, site, duration_ms, 'marker' as method from marker_rows
    union all
    select lot_id, block, site, duration_ms, 'csv' from csv_rows
),

measured as (
    select
        lot_id, block, site, method,
        count(*) as parts,
        avg(duration_ms) as mean_ms,
        quantile_cont(duration_ms, 0.5) as p50_ms,
        quantile_cont(duration_ms, 0.95) as p95_ms,
        sum(duration_ms) as total_ms
    from per_part
    group by grouping sets ((lot_id, block, site, method), (lot_id, block, method))
),

summarised as (
    select lot_id, block, site, 'tsr' as method, parts, mean_ms, null::double as p50_ms,
           null::double as p95_ms, total_ms
    from tsr_times
),

estimated as (
    select lot_id, block, site, 'estimate' as method, parts, mean_ms, null::double,
           null::double, mean_ms * parts, ci_low_ms, ci_high_ms, identifiable, warning,
           group_blocks, group_kind, group_ms, group_ci_low_ms, group_ci_high_ms
    from estimates
),

unioned as (
    select *, null::double as ci_low_ms, null::double as ci_high_ms, true as identifiable,
           null::varchar as warning, null::varchar as group_blocks,
           null::varchar as group_kind, null::double as group_ms,
           null::double as group_ci_low_ms, null::double as group_ci_high_ms
    from measured
    union all
    select *, null::double, null::double, true, null::varchar, null::varchar,
           null::varchar, null::double, null::double, null::double
    from summarised
    union all
    select * from estimated
),

final as (
    select
        u.lot_id,
        u.block,
        u.site,
        u.parts,
        u.mean_ms,
        u.p50_ms,
        u.p95_ms,
        u.total_ms,
        u.method,
        case u.method when 'marker' then 1 when 'csv' then 2 when 'tsr' then 3 else 4 end
            as method_rank,
        100.0 * u.total_ms / nullif(pt.part_total_ms, 0) as share_pct,
        u.ci_low_ms,
        u.ci_high_ms,
        u.identifiable,
        u.warning,
        u.group_blocks,
        u.group_kind,
        u.group_ms,
        u.group_ci_low_ms,
        u.group_ci_high_ms
    from unioned as u
    left join part_time as pt
        on pt.lot_id = u.lot_id and pt.site is not distinct from u.site
)

select * from final
