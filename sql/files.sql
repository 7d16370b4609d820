-- files: one row per log the store has seen (ok, partial or rejected).
-- Key: file_id (first 16 hex digits of the content's sha256). Not null: file_id, sha256,
-- status. A partial file's error says where the damage is; a rejected file has no rows
-- in any other view.
with

registry as (
    select * from raw_files
),

final as (
    select
        file_id,
        path,
        sha256,
        format,
        status,
        error,
        records,
        parts,
        size_bytes,
        compression,
        byte_order,
        records_by_type,
        dropped_results,
        ingested_at,
        tandem_version
    from registry
)

select * from final
