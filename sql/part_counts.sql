-- part_counts: one row per PCR (STDF V4, PCR 1/30). Key: (file_id, head, site).
-- is_summary: HEAD_NUM 255 = over all sites. 4294967295 means "not given".
with

pcr as (
    select * from raw_pcr
),

final as (
    select
        file_id,
        lot as lot_id,
        head_num::integer as head,
        site_num::integer as site,
        head_num = 255 as is_summary,
        part_cnt::bigint as parts,
        nullif(rtst_cnt, 4294967295)::bigint as retested,
        nullif(abrt_cnt, 4294967295)::bigint as aborted,
        nullif(good_cnt, 4294967295)::bigint as good,
        nullif(func_cnt, 4294967295)::bigint as functional
    from pcr
)

select * from final
