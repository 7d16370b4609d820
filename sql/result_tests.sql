-- result_tests: one row per (file_id, record, test_num) of a log's results: the test's
-- name (the first record of that number with a TEST_TXT, else the TSR TEST_NAM) and the
-- block its records outside every BPS/EPS section belong to (the TSR SEQ_NAME, else the
-- first matching rule of the block map given to `tandem times --blocks`, else null).
-- Derived once per log (and again when the rules change), so the results view joins this
-- small table instead of searching every result row for names on every query.
-- materialized: file
with

ptr as (
    select lot, file_id, 'PTR' as record, test_num, test_txt, rec_index, section_id
    from raw_ptr
),

mpr as (
    select lot, file_id, 'MPR' as record, test_num, test_txt, rec_index, section_id
    from raw_mpr
),

ftr as (
    select lot, file_id, 'FTR' as record, test_num, test_txt, rec_index, section_id
    from raw_ftr
),

tsr as (
    select
        file_id,
        test_num,
        max(nullif(test_nam, '')) as tsr_name,
        max(nullif(seq_name, '')) as tsr_block
    from raw_tsr
    group by file_id, test_num
),

rules as (
    select * from raw_block_rules
),

all_rows as (
    select * from ptr
    union all
    select * from mpr
    union all
    select * from ftr
),

tests as (
    select
        lot, file_id, record, test_num,
        arg_min(test_txt, rec_index) filter (where test_txt <> '') as first_name,
        count(*) as result_records,
        count(*) filter (where section_id is null) as unsectioned_records
    from all_rows
    group by lot, file_id, record, test_num
),

named as (
    select
        t.lot, t.file_id, t.record, t.test_num, t.result_records, t.unsectioned_records,
        coalesce(t.first_name, s.tsr_name) as test_name,
        s.tsr_block
    from tests as t
    left join tsr as s on s.file_id = t.file_id and s.test_num = t.test_num
),

final as (
    select
        n.lot as lot_id,
        n.file_id,
        n.record,
        n.test_num,
        n.test_name,
        coalesce(any_value(n.tsr_block), arg_min(r.block, r.priority)) as fallback_block,
        any_value(n.tsr_block) as tsr_block,
        any_value(n.result_records) as result_records,
        any_value(n.unsectioned_records) as unsectioned_records
    from named as n
    left join rules as r
        on (r.kind = 'tests' and n.test_num between r.lo and r.hi)
        or (r.kind = 'names' and n.test_name glob r.pattern)
    group by n.lot, n.file_id, n.record, n.test_num, n.test_name
)

select * from final
