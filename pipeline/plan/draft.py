"""A starting block map from a lot: the measured blocks in program order (via
``blockmap.draft_block_map``), with ``uses`` inferred where the log says which pins a
block touches.

Pins come from the returned-pin lists of functional and multiple-result records (FTR and
MPR RTN_INDX: PMR indices, STDF V4), joined to the ``pins`` view (PMR) for a name. A pin in a
pin group (PGR, ``pin_groups``; the smallest group when several hold it) becomes the
per-site resource ``pins_<group>``, any other pin ``pin_<name>``: blocks that touch the same
pins then cannot overlap. Blocks with no pin records keep ``uses`` marked TODO for the
engineer, as do power and the limits.
"""

from __future__ import annotations

import re

from ..store import Store
from .blockmap import draft_block_map
from .measure import Measured, Session, measure_on

PIN_QUERY = """
with lot_files as (
    select distinct file_id from lots where lot_id = ?
),
returned as (
    select file_id, rec_index, unnest(rtn_indx)::integer as pin_index
    from raw_ftr where file_id in (select file_id from lot_files)
    union all
    select file_id, rec_index, unnest(rtn_indx)::integer
    from raw_mpr where file_id in (select file_id from lot_files)
),
blocks as (
    select distinct file_id, rec_index, block from results
    where record in ('FTR', 'MPR') and file_id in (select file_id from lot_files)
),
sizes as (
    select file_id, group_name, count(*) as members from pin_groups group by all
),
smallest as (
    select g.file_id, g.pin_index, arg_min(g.group_name, s.members) as group_name
    from pin_groups g join sizes s using (file_id, group_name)
    group by g.file_id, g.pin_index
)
select distinct b.block,
       coalesce(p.logical_name, p.physical_name, p.channel_name,
                'pmr' || r.pin_index::varchar) as pin,
       s.group_name
from returned r
join blocks b using (file_id, rec_index)
left join pins p on p.file_id = r.file_id and p.pin_index = r.pin_index
left join smallest s on s.file_id = r.file_id and s.pin_index = r.pin_index
order by all
"""


def pin_uses(db: Session, lot: str) -> dict[str, list[str]]:
    """block -> the pin resources it touches (only blocks with pin records)."""
    rows = db.sql(PIN_QUERY, [lot])
    uses: dict[str, list[str]] = {}
    for block, pin, group in rows.iter_rows():
        name = f"pins_{_clean(group)}" if group else f"pin_{_clean(pin)}"
        held = uses.setdefault(block, [])
        if name not in held:
            held.append(name)
    return uses


def _clean(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_-]+", "_", name).strip("_") or "unnamed"


def draft_map(store: Store, lot: str | None = None) -> tuple[str, Measured, dict[str, list[str]]]:
    """(TOML text, the lot's measurements it was drafted from, the uses inferred)."""
    db = Session(store)
    try:
        m = measure_on(db, lot, "mean_ms")
        uses = pin_uses(db, m.lot_id)
    finally:
        db.close()
    blocks = [(b, m.times[b][None]) for b in m.order]
    return draft_block_map(blocks, uses or None), m, uses
