-- bins: one row per HBR or SBR (STDF V4, HBR 1/40 and SBR 1/50). Key: (file_id, bin_kind,
-- head, site, bin). is_summary: HEAD_NUM 255 = over all sites. pass_fail is 'P', 'F' or
-- null (unknown).
with

hbr as (
    select * from raw_hbr
),

sbr as (
    select * from raw_sbr
),

final as (
    select file_id, lot as lot_id, 'hard' as bin_kind, head_num::integer as head, site_num::integer as site,
           head_num = 255 as is_summary, hbin_num::integer as bin, hbin_cnt::bigint as parts,
           nullif(trim(hbin_pf), '') as pass_fail, nullif(hbin_nam, '') as bin_name
    from hbr
    union all
    select file_id, lot, 'soft', head_num::integer, site_num::integer, head_num = 255,
           sbin_num::integer, sbin_cnt::bigint, nullif(trim(sbin_pf), ''),
           nullif(sbin_nam, '')
    from sbr
)

select * from final
