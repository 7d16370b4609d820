-- part_blocks: one row per (file_id, part_index, block): which blocks each STDF part ran,
-- from its results (results.block: section, else TSR SEQ_NAME, else block-map rule, else
-- 'unassigned'). The estimate method and reconciliation read it.
-- Key: (file_id, part_index, block).
-- materialized: file
with

results as (
    select * from results where part_index is not null
),

final as (
    select
        lot_id,
        file_id,
        part_index,
        block,
        count(*) as result_rows,
        min(rec_index) as first_rec,
        max(rec_index) as last_rec
    from results
    group by lot_id, file_id, part_index, block
)

select * from final
