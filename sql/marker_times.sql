-- marker_times: one row per (file_id, touchdown, head, site, block) with timing markers:
-- the block's measured time on that site in that touchdown (markers of one block on one
-- site in one touchdown are summed), and the part tested there. Key: (file_id,
-- touchdown, head, site, block).
-- materialized: file
with

markers as (
    select * from markers where is_valid
),

parts as (
    select file_id, lot_id, part_index, touchdown, head, site from parts
),

per_block as (
    select
        lot_id, file_id, touchdown, head, site, block,
        sum(end_us - start_us) / 1000.0 as duration_ms,
        min(start_us) / 1000.0 as start_ms,
        max(end_us) / 1000.0 as end_ms,
        count(*) as markers
    from markers
    group by lot_id, file_id, touchdown, head, site, block
),

final as (
    select
        b.lot_id,
        b.file_id,
        b.touchdown,
        b.head,
        b.site,
        p.part_index,
        b.block,
        b.duration_ms,
        b.start_ms,
        b.end_ms,
        b.markers
    from per_block as b
    left join parts as p
        on p.file_id = b.file_id and p.touchdown = b.touchdown
        and p.head = b.head and p.site = b.site
)

select * from final
