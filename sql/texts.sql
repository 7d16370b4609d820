-- texts: one row per DTR or GDR (STDF V4, DTR 50/30 and GDR 50/10), with the touchdown
-- and program section it was written in. GDR values are shown as `TYPE:value` items.
-- Key: (file_id, rec_index).
with

dtr as (
    select * from raw_dtr
),

gdr as (
    select * from raw_gdr
),

final as (
    select file_id, lot as lot_id, rec_index, touchdown, section_id, 'DTR' as record,
           text_dat as text
    from dtr
    union all
    select file_id, lot, rec_index, touchdown, section_id, 'GDR',
           array_to_string(gen_data, ' ')
    from gdr
)

select * from final
