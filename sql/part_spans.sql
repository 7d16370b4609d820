-- part_spans: one row per part with per-block timing (markers or timing CSV): the time
-- its blocks ran (busy_ms, summed: blocks run at once count each), the span from its
-- first block's start to its last block's end (span_ms), the time some block of it was
-- running (union_ms: the union of its block intervals), the time inside the span when
-- none was (idle_ms = span_ms - union_ms: waits, e.g. for a shared instrument), and the
-- part time outside that span (outside_ms = test_time_ms - span_ms: per-part overhead
-- such as contact set-up and binning). alone_ms = test_time_ms - idle_ms is what the part
-- would take with nothing to wait for: a serial program's busy time plus overhead, a
-- concurrent one's overlapped time plus overhead. wait_ms = span_ms - busy_ms (negative
-- where blocks overlap). Key: (file_id, touchdown, head, site).
-- materialized: file
with

intervals as (
    select lot_id, file_id, touchdown, head, site, 'marker' as method, start_ms, end_ms,
           duration_ms
    from marker_times
    union all
    select lot_id, file_id, touchdown, head, site, 'csv', start_ms, end_ms, duration_ms
    from csv_times
),

ordered as (
    select
        *,
        max(end_ms) over (
            partition by file_id, touchdown, head, site, method order by start_ms, end_ms
            rows between unbounded preceding and 1 preceding) as reach_ms
    from intervals
),

islands as (
    select
        *,
        sum(case when reach_ms is null or start_ms > reach_ms then 1 else 0 end) over (
            partition by file_id, touchdown, head, site, method order by start_ms, end_ms
            rows unbounded preceding) as island
    from ordered
),

covered as (
    select lot_id, file_id, touchdown, head, site, method, sum(hi - lo) as union_ms
    from (select lot_id, file_id, touchdown, head, site, method, island,
                 min(start_ms) as lo, max(end_ms) as hi
          from islands group by all)
    group by all
),

spans as (
    select lot_id, file_id, touchdown, head, site, method,
           sum(duration_ms) as busy_ms, min(start_ms) as first_ms, max(end_ms) as last_ms
    from intervals group by all
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
        p.test_time_ms - (s.last_ms - s.first_ms) as outside_ms,
        c.union_ms,
        s.last_ms - s.first_ms - c.union_ms as idle_ms,
        p.test_time_ms - (s.last_ms - s.first_ms - c.union_ms) as alone_ms
    from spans as s
    join covered as c using (lot_id, file_id, touchdown, head, site, method)
    left join parts as p using (file_id, touchdown, head, site)
)

select * from final
