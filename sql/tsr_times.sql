-- tsr_times: one row per (lot_id, block, site) from test summaries (STDF V4, TSR 10/30):
-- TEST_TIM (mean seconds per execution) x EXEC_CNT, summed per block and divided by the
-- parts tested, in ms. Per-site TSRs where a log has them; else the HEAD_NUM 255 summary,
-- pooled (site null). A test's block is the one its results were assigned (section or
-- rule), else the TSR's own SEQ_NAME, else 'unassigned'.
-- materialized: lot
with

tsr as (
    select * from test_summaries where test_time_s is not null and exec_cnt > 0
),

test_blocks as (
    select file_id, test_num, block from test_blocks
),

parts as (
    select file_id, lot_id, site, count(*) as parts from parts group by file_id, lot_id, site
),

lot_of as (
    select file_id, any_value(lot_id) as lot_id, sum(parts) as parts from parts
    group by file_id
),

has_site_tsr as (
    select distinct file_id from tsr where not is_summary
),

per_test as (
    select
        t.file_id,
        case when t.is_summary then null else t.site end as site,
        coalesce(b.block, t.block, 'unassigned') as block,
        t.test_time_s * t.exec_cnt * 1000.0 as test_ms
    from tsr as t
    left join test_blocks as b using (file_id, test_num)
    where (t.is_summary and t.file_id not in (select file_id from has_site_tsr))
       or (not t.is_summary)
),

per_site as (
    select l.lot_id, t.block, t.site, sum(t.test_ms) as total_ms,
           sum(coalesce(p.parts, 0)) as parts_sum
    from (select file_id, site, block, sum(test_ms) as test_ms from per_test
          group by file_id, site, block) as t
    join lot_of as l using (file_id)
    left join parts as p on p.file_id = t.file_id and p.site = t.site
    group by l.lot_id, t.block, t.site
),

pooled_from_sites as (
    select l.lot_id, t.block, null::integer as site, sum(t.test_ms) as total_ms,
           sum(l.parts) as parts_sum
    from (select file_id, block, sum(test_ms) as test_ms from per_test
          group by file_id, block) as t
    join lot_of as l using (file_id)
    group by l.lot_id, t.block
),

final as (
    select lot_id, block, site, parts_sum::bigint as parts, total_ms / parts_sum as mean_ms,
           total_ms
    from per_site
    where site is not null and parts_sum > 0
    union all
    select lot_id, block, site, parts_sum::bigint, total_ms / parts_sum, total_ms
    from pooled_from_sites
    where parts_sum > 0
)

select * from final
