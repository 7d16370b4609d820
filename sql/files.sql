-- files: one row per log the store has seen (ok, partial or rejected).
-- Key: file_id (first 16 hex digits of the content's sha256). Not null: file_id, sha256,
-- status. A partial file's error says where the damage is; a rejected file has no rows
-- in any other view. lot_ids: the lots its rows are filed under (a timing CSV may hold
-- several; an STDF log one; a rejected log none). commit_id: the commit that stored it.
with

registry as (
    select * from raw_files
),

final as (
    select
        file_id,
        any_value(path) as path,
        any_value(sha256) as sha256,
        any_value(format) as format,
        any_value(status) as status,
        any_value(error) as error,
        any_value(records) as records,
        any_value(parts) as parts,
        any_value(size_bytes) as size_bytes,
        any_value(compression) as compression,
        any_value(byte_order) as byte_order,
        any_value(records_by_type) as records_by_type,
        any_value(dropped_results) as dropped_results,
        any_value(ingested_at) as ingested_at,
        any_value(tandem_version) as tandem_version,
        coalesce(list(lot_id order by lot_id) filter (where lot_id is not null),
                 []::varchar[]) as lot_ids,
        min(commit_id) as commit_id
    from registry
    group by file_id
)

select * from final
