-- touchdowns: one row per touchdown (one insertion of N sites tested together).
-- Key: (file_id, touchdown). touchdown_ms: the last marker's end when the log has timing
-- markers (the touchdown's own clock), else the slowest site's part time (PRR.TEST_T, or
-- the timing CSV's last block end). method says which.
-- materialized: file
with

parts as (
    select * from parts
),

markers as (
    select * from markers where is_valid
),

csv as (
    select file_id, touchdown, max(end_ms) as end_ms from raw_timing_csv
    group by file_id, touchdown
),

by_part as (
    select
        file_id,
        any_value(lot_id) as lot_id,
        touchdown,
        count(*)::integer as sites,
        list(site order by site) as site_list,
        max(test_time_ms) as slowest_part_ms
    from parts
    group by file_id, touchdown
),

by_marker as (
    select file_id, touchdown, max(end_us) / 1000.0 as marker_ms
    from markers
    group by file_id, touchdown
),

final as (
    select
        p.lot_id,
        p.file_id,
        p.touchdown,
        p.sites,
        p.site_list,
        coalesce(m.marker_ms, c.end_ms, p.slowest_part_ms) as touchdown_ms,
        p.slowest_part_ms,
        case
            when m.marker_ms is not null then 'marker'
            when c.end_ms is not null then 'csv'
            when p.slowest_part_ms is not null then 'part_time'
        end as method
    from by_part as p
    left join by_marker as m using (file_id, touchdown)
    left join csv as c using (file_id, touchdown)
)

select * from final
