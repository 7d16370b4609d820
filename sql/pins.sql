-- pins: one row per PMR channel (STDF V4, PMR 1/60). Key: (file_id, pin_index, head,
-- site).
with

pmr as (
    select * from raw_pmr
),

final as (
    select
        file_id,
        lot as lot_id,
        pmr_indx::integer as pin_index,
        chan_typ::integer as channel_type,
        nullif(chan_nam, '') as channel_name,
        nullif(phy_nam, '') as physical_name,
        nullif(log_nam, '') as logical_name,
        head_num::integer as head,
        site_num::integer as site
    from pmr
)

select * from final
