-- part_blocks: one row per (file_id, part_index, block): which blocks each STDF part ran,
-- and how many result rows it had in each (results.block: section, else TSR SEQ_NAME,
-- else block-map rule, else 'unassigned'; an MPR counts one row per returned result, as
-- in results). The estimate method and reconciliation read it.
-- Key: (file_id, part_index, block).
-- The result records are grouped by their integer keys first (part, section, test) and
-- named after: the same answer as grouping the results view, at a fraction of the cost.
-- materialized: file
with

records as (
    select lot, file_id, part_index, section_id, 1 as record, test_num, rec_index,
           1 as result_rows
    from raw_ptr
    union all
    select lot, file_id, part_index, section_id, 2, test_num, rec_index,
           len(rtn_rslt)
    from raw_mpr
    union all
    select lot, file_id, part_index, section_id, 3, test_num, rec_index, 1
    from raw_ftr
),

grouped as (
    select
        lot, file_id, part_index, section_id,
        -- a test's fallback block only matters outside every section
        case when section_id is null then record end as record,
        case when section_id is null then test_num end as test_num,
        sum(result_rows) as result_rows,
        min(rec_index) as first_rec,
        max(rec_index) as last_rec
    from records
    where part_index is not null
    group by all
),

named as (
    select
        g.*,
        coalesce(s.name, t.fallback_block, 'unassigned') as block
    from grouped as g
    left join raw_sections as s
        on s.lot = g.lot and s.file_id = g.file_id and s.section_id = g.section_id
    left join result_tests as t
        on g.section_id is null and t.lot_id = g.lot and t.file_id = g.file_id
        and t.record = ['PTR', 'MPR', 'FTR'][g.record] and t.test_num = g.test_num
),

final as (
    select
        lot as lot_id,
        file_id,
        part_index,
        block,
        sum(result_rows)::bigint as result_rows,
        min(first_rec) as first_rec,
        max(last_rec) as last_rec
    from named
    group by all
)

select * from final
