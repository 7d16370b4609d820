-- wafers: one row per wafer (STDF V4, WIR 2/10 opens it, WRR 2/20 closes it), the n-th
-- WIR of a head paired with the n-th WRR of that head. Key: (file_id, head, wafer_seq).
with

wir as (
    select *, row_number() over (partition by file_id, head_num order by rec_index) as seq
    from raw_wir
),

wrr as (
    select *, row_number() over (partition by file_id, head_num order by rec_index) as seq
    from raw_wrr
),

final as (
    select
        wir.file_id,
        wir.lot as lot_id,
        wir.head_num::integer as head,
        wir.seq::integer as wafer_seq,
        coalesce(nullif(wir.wafer_id, ''), nullif(wrr.wafer_id, '')) as wafer_id,
        case when wir.start_t > 0 then make_timestamp(wir.start_t::bigint * 1000000) end
            as started_at,
        case when wrr.finish_t > 0 then make_timestamp(wrr.finish_t::bigint * 1000000) end
            as finished_at,
        wrr.part_cnt::bigint as parts,
        nullif(wrr.good_cnt, 4294967295)::bigint as good
    from wir
    left join wrr
        on wrr.file_id = wir.file_id and wrr.head_num = wir.head_num and wrr.seq = wir.seq
)

select * from final
