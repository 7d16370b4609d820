-- part_spans: one row per part with per-block timing (markers or timing CSV): the time
-- its blocks ran (busy_ms), the span from its first block's start to its last block's
-- end (span_ms; span - busy = time spent waiting between its blocks, e.g. for a shared
-- instrument), and the part time outside that span (outside_ms = test_time_ms - span_ms:
-- per-part overhead such as contact set-up and binning). Key: (file_id, touchdown,
-- head, site).
-- materialized: file
with

markers as (
    select lot_id, file_id, touchdown, head, site,
           sum(duration_ms) as busy_ms, min(start_ms) as first_ms, max(end_ms) as last_ms
    from marker_times group by lot_id, file_id, touchdown, head, site
),

csv as (
    select lot_id, file_id, touchdown, head, site,
           sum(duration_ms) as busy_ms, min(start_ms) as first_ms, max(end_ms) as last_ms
    from csv_times group by lot_id, file_id, touchdown, head, site
),

spans as (
    select *, 'marker' as method from markers
    union all
    select *, 'csv' from csv
),

parts as (
    select file_id, touchdown, head, site, test_time_ms from parts
),

final as (
    select
        s.lot_id, s.file_id, s.touchdown, s.head, s.site, s.method,
        p.test_time_ms,
        s.busy_ms,
        s.last_ms - s.first_ms as span_ms,
        s.last_ms - s.first_ms - s.busy_ms as wait_ms,
        p.test_time_ms - (s.last_ms - s.first_ms) as outside_ms
    from spans as s
    left join parts as p using (file_id, touchdown, head, site)
)

select * from final
