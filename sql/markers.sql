-- markers: one row per timing marker, our convention (README, "Timing markers"): a DTR
-- (STDF V4, DTR 50/30) whose text is `TT block=<name> site=<n> start_us=<int>
-- end_us=<int>` with optional `head=<n>`, tokens in any order, times in microseconds from
-- the touchdown's start. Key: (file_id, rec_index). is_valid is false when a token is
-- missing or end_us < start_us; such markers are kept so they can be reported.
-- materialized: file
with

dtr as (
    select * from raw_dtr
),

canonical as (
    -- The order the README writes the tokens in, parsed with one expression; any other
    -- order (or a head= token) takes the token-by-token path below. Same answer, and a
    -- production log holds hundreds of thousands of markers.
    select
        lot, file_id, rec_index, touchdown, text_dat,
        regexp_extract(text_dat, '^TT block=(\S+) site=(\d+) start_us=(-?\d+) end_us=(-?\d+)$',
                       ['b', 's', 'st', 'e']) as m
    from dtr
    where regexp_matches(text_dat, '^\s*TT(\s|$)')
),

tt as (
    select
        lot,
        file_id,
        rec_index,
        touchdown,
        text_dat,
        case when m.b <> '' then m.b
             else regexp_extract(text_dat, '(?:^|\s)block=(\S+)', 1) end as block_tok,
        case when m.b <> '' then m.s
             else regexp_extract(text_dat, '(?:^|\s)site=(\d+)', 1) end as site_tok,
        case when m.b <> '' then ''
             else regexp_extract(text_dat, '(?:^|\s)head=(\d+)', 1) end as head_tok,
        case when m.b <> '' then m.st
             else regexp_extract(text_dat, '(?:^|\s)start_us=(-?\d+)', 1) end as start_tok,
        case when m.b <> '' then m.e
             else regexp_extract(text_dat, '(?:^|\s)end_us=(-?\d+)', 1) end as end_tok
    from canonical
),

final as (
    select
        lot as lot_id,
        file_id,
        rec_index,
        touchdown,
        nullif(block_tok, '') as block,
        try_cast(nullif(site_tok, '') as integer) as site,
        coalesce(try_cast(nullif(head_tok, '') as integer), 1) as head,
        try_cast(nullif(start_tok, '') as bigint) as start_us,
        try_cast(nullif(end_tok, '') as bigint) as end_us,
        (try_cast(nullif(end_tok, '') as bigint) - try_cast(nullif(start_tok, '') as bigint))
            / 1000.0 as duration_ms,
        coalesce(block_tok <> '' and site_tok <> '' and start_tok <> '' and end_tok <> ''
                 and try_cast(end_tok as bigint) >= try_cast(start_tok as bigint), false)
            as is_valid,
        text_dat as text
    from tt
)

select * from final
