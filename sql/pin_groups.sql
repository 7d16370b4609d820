-- pin_groups: one row per (pin group, member pin) from PGR (STDF V4, PGR 1/62).
-- Key: (file_id, group_index, pin_index).
with

pgr as (
    select * from raw_pgr
),

final as (
    select
        file_id,
        lot as lot_id,
        grp_indx::integer as group_index,
        nullif(grp_nam, '') as group_name,
        unnest(pmr_indx)::integer as pin_index
    from pgr
)

select * from final
