-- results: one row per PTR, per FTR, and per MPR returned result (STDF V4, PTR 15/10,
-- FTR 15/20, MPR 15/15). Key: (file_id, rec_index, element). element is the 0-based
-- position in MPR RTN_RSLT, else null; value is null for FTR. Limits and units already
-- carry the default data of the first record of each test number (decoder).
-- test_name: the record's TEST_TXT, else the first named record of that test number in
-- the file, else the TSR TEST_NAM. block: the innermost BPS/EPS section, else the TSR
-- SEQ_NAME of that test number, else the first matching rule of the block map last
-- given to `tandem times --blocks` (test-number range or name glob), else 'unassigned'
-- (names and fallback blocks come from result_tests, derived once per log).
-- failed: TEST_FLG bit 7; null when bit 6 (no pass/fail indication) is set.
-- A filter on lot_id reads only that lot's files.
with

ptr as (
    select * from raw_ptr
),

mpr as (
    select * from raw_mpr
),

ftr as (
    select * from raw_ftr
),

sections as (
    select lot, file_id, section_id, name from raw_sections
),

tests as (
    select * from result_tests
),

ptr_rows as (
    select
        lot, file_id, part_index, head_num, site_num, test_num, test_txt, section_id,
        rec_index, 'PTR' as record, null::integer as element, result::double as value,
        test_flg, lo_limit::double as lo_limit, hi_limit::double as hi_limit, units
    from ptr
),

mpr_rows as (
    select
        lot, file_id, part_index, head_num, site_num, test_num, test_txt, section_id,
        rec_index, 'MPR' as record, unnest(range(len(rtn_rslt)))::integer as element,
        unnest(rtn_rslt)::double as value, test_flg,
        lo_limit::double as lo_limit, hi_limit::double as hi_limit, units
    from mpr
),

ftr_rows as (
    select
        lot, file_id, part_index, head_num, site_num, test_num, test_txt, section_id,
        rec_index, 'FTR' as record, null::integer as element, null::double as value,
        test_flg, null::double as lo_limit, null::double as hi_limit,
        null::varchar as units
    from ftr
),

all_rows as (
    select * from ptr_rows
    union all
    select * from mpr_rows
    union all
    select * from ftr_rows
),

final as (
    select
        r.file_id,
        r.lot as lot_id,
        r.part_index,
        r.head_num::integer as head,
        r.site_num::integer as site,
        r.test_num::bigint as test_num,
        coalesce(nullif(r.test_txt, ''), t.test_name) as test_name,
        coalesce(s.name, t.fallback_block, 'unassigned') as block,
        r.record,
        r.element,
        r.value,
        case when (r.test_flg & 64) <> 0 then null else (r.test_flg & 128) <> 0 end as failed,
        r.lo_limit,
        r.hi_limit,
        r.units,
        r.rec_index,
        r.section_id
    from all_rows as r
    left join tests as t
        on t.lot_id = r.lot and t.file_id = r.file_id and t.record = r.record
        and t.test_num = r.test_num
    left join sections as s
        on s.lot = r.lot and s.file_id = r.file_id and s.section_id = r.section_id
)

select * from final
