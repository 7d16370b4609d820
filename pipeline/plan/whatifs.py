"""What-ifs of the block map applied to a ``PlanSpec``: each gives one changed spec per
way it can be done (an alternative: one per option), or a reason it cannot be evaluated.

- broadcast: the members become one block ``a+b+...`` taking, on each site, the longest
  member's time plus ``overhead_ms``; it holds every member's ``uses``, waits for every
  member's ``after`` and sits at the first member's place in program order. Blocks that
  waited for a member wait for it. Power: the what-if's ``power_w``, else the members'
  sum (the block map's rule: every core still switches).
- alternative: the block's time (on every site), power and uses replaced by the option's,
  each left out = as measured / as mapped.
- extra_instrument: ``add`` more of the resource (per site, or in the shared pool).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

from .blockmap import Alternative, Broadcast, ExtraInstrument, WhatIf
from .model import BlockSpec, PlanSpec, PoolSpec


@dataclass(frozen=True)
class Variant:
    option: str                       # "" unless an alternative's option
    spec: PlanSpec
    origins: dict[str, tuple[str, ...]]   # planned block -> the measured blocks it stands for
    detail: str


def touched(w: WhatIf, spec: PlanSpec) -> tuple[str, ...]:
    """The measured blocks a what-if changes (an instrument: the blocks using it)."""
    if isinstance(w, Broadcast):
        return w.blocks
    if isinstance(w, Alternative):
        return (w.block,)
    return tuple(b.name for b in spec.blocks if w.resource in b.uses)


def variants(w: WhatIf, spec: PlanSpec) -> list[Variant] | str:
    """The changed specs, or why the what-if cannot apply to this spec."""
    names = set(spec.names())
    absent = [b for b in touched(w, spec) if b not in names]
    if absent and not isinstance(w, ExtraInstrument):
        return f"not measured in this lot (or merged by another what-if): {', '.join(absent)}"
    if isinstance(w, Broadcast):
        return _broadcast(w, spec)
    if isinstance(w, Alternative):
        return [_option(w, spec, k) for k in range(len(w.options))]
    res = spec.resources.get(w.resource, PoolSpec())
    more = PoolSpec(res.count + w.add, res.shared)
    where = "in the shared pool" if res.shared else "per site"
    return [Variant("", replace(spec, resources={**spec.resources, w.resource: more}), {},
                    f"{w.resource}: {res.count} -> {more.count} {where}")]


def _broadcast(w: Broadcast, spec: PlanSpec) -> list[Variant] | str:
    members = set(w.blocks)
    pos = [k for k, b in enumerate(spec.blocks) if b.name in members]
    between = [b.name for b in spec.blocks[pos[0]:pos[-1] + 1]
               if b.pinned and b.name not in members]
    if between:
        return (f"pinned block {between[0]} sits between its members in program order: "
                "merging them would move a member across it")
    merged = "+".join(w.blocks)
    parts = [spec.block(m) for m in w.blocks]
    times = {s: max(p.times_ms[s] for p in parts) + w.overhead_ms for s in spec.sites}
    power = w.power_w if w.power_w is not None else sum(p.power_w for p in parts)
    uses = tuple(dict.fromkeys(u for p in parts for u in p.uses))
    after = tuple(dict.fromkeys(d for p in parts for d in p.after if d not in members))
    out = []
    for k, b in enumerate(spec.blocks):
        if k == pos[0]:
            out.append(BlockSpec(merged, times, power, uses, after, False))
        if b.name not in members:
            out.append(replace(b, after=tuple(dict.fromkeys(
                merged if d in members else d for d in b.after))))
    longest = max(times.values())
    return [Variant("", spec.with_blocks(out), {merged: w.blocks},
                    f"{merged}: {longest:.1f} ms (longest member + {w.overhead_ms:g} ms), "
                    f"{power:.2f} W")]


def _option(w: Alternative, spec: PlanSpec, k: int) -> Variant:
    o = w.options[k]
    base = spec.block(w.block)
    times = dict(base.times_ms) if o.time_ms is None else {s: o.time_ms for s in spec.sites}
    new = replace(base, times_ms=times,
                  power_w=base.power_w if o.power_w is None else o.power_w,
                  uses=base.uses if o.uses is None else o.uses)
    blocks = [new if b.name == w.block else b for b in spec.blocks]
    shown = ("as measured" if o.time_ms is None else f"{o.time_ms:g} ms")
    return Variant(o.name, spec.with_blocks(blocks), {},
                   f"{w.block} by {o.name}: {shown}, {new.power_w:.2f} W"
                   + (f", uses {', '.join(new.uses)}" if new.uses else ""))


def describe(w: WhatIf) -> str:
    if isinstance(w, Broadcast):
        return f"broadcast {' + '.join(w.blocks)}"
    if isinstance(w, Alternative):
        return f"alternative for {w.block}: {', '.join(o.name for o in w.options)}"
    assert isinstance(w, ExtraInstrument)
    return f"{w.add} more {w.resource}"
