-- sections: one row per BPS/EPS program section (STDF V4, BPS 20/10 and EPS 20/20).
-- Key: (file_id, section_id). parent_id is the enclosing section (null at top level);
-- end_rec is null for a section the file never closed.
with

raw as (
    select * from raw_sections
),

final as (
    select
        file_id,
        lot as lot_id,
        section_id,
        name,
        parent_id,
        depth,
        touchdown,
        begin_rec,
        end_rec
    from raw
)

select * from final
