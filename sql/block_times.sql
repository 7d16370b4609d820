-- block_times: per lot, the best timing source's figures for each block and site
-- (order: marker, csv, tsr, estimate; the others stay in block_times_all).
-- One row per (lot_id, block, site); site null = pooled over sites.
-- materialized: lot
with

all_sources as (
    select * from block_times_all
),

best as (
    select lot_id, min(method_rank) as method_rank from all_sources group by lot_id
),

final as (
    select a.*
    from all_sources as a
    join best as b using (lot_id, method_rank)
)

select * from final
