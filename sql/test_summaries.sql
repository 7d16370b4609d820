-- test_summaries: one row per TSR (STDF V4, TSR 10/30). Key: (file_id, head, site,
-- test_num). is_summary: HEAD_NUM 255 = over all sites. test_time_s is TEST_TIM, the mean
-- seconds of one execution, null when OPT_FLAG bit 2 says it is invalid; likewise
-- test_min_s (bit 0) and test_max_s (bit 1).
with

tsr as (
    select * from raw_tsr
),

final as (
    select
        file_id,
        lot as lot_id,
        head_num::integer as head,
        site_num::integer as site,
        head_num = 255 as is_summary,
        test_num::bigint as test_num,
        nullif(test_typ, ' ') as test_type,
        nullif(test_nam, '') as test_name,
        nullif(seq_name, '') as block,
        nullif(test_lbl, '') as test_label,
        exec_cnt::bigint as exec_cnt,
        nullif(fail_cnt, 4294967295)::bigint as fail_cnt,
        nullif(alrm_cnt, 4294967295)::bigint as alarm_cnt,
        case when coalesce(opt_flag & 4, 4) = 0 then test_tim::double end as test_time_s,
        case when coalesce(opt_flag & 1, 1) = 0 then test_min::double end as test_min_s,
        case when coalesce(opt_flag & 2, 2) = 0 then test_max::double end as test_max_s,
        case when coalesce(opt_flag & 16, 16) = 0 then tst_sums::double end as test_sum,
        case when coalesce(opt_flag & 32, 32) = 0 then tst_sqrs::double end as test_sum_sq
    from tsr
)

select * from final
