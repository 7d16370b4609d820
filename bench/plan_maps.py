"""Invented planning instances, as a PlanSpec and as files a user would have: a timing
CSV lot (one row per part and block, serial in program order) and its block map.

- ``large(seed, blocks, sites)``: the planner benchmark's shape. One pinned first block
  (contact), sparse ``after`` edges, three per-site instruments, two touchdown-wide pools
  (count 1 and 2), per-site power and parallel limits, per-site times jittered by 2 %.
- ``rf_lot(seed)``: 12 blocks x 4 sites with one shared RF instrument that four blocks
  need and three per-site instruments, the shape where proving the optimum is hardest.

Every name and number is invented. ``write_lot`` writes ``<lot>.csv`` and ``blocks.toml``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from pipeline.plan.model import BlockSpec, PlanSpec, PoolSpec

LOCAL = ("scan_port", "dc_unit", "clock_gen")


def large(seed: int, n_blocks: int = 30, n_sites: int = 8) -> PlanSpec:
    """The benchmark's instance (30 x 8 by default; 24 x 8 is the issue's map)."""
    rng = np.random.default_rng(seed)
    sites = tuple(range(1, n_sites + 1))
    shared = {"rf_meter": PoolSpec(1, True), "hv_supply": PoolSpec(2, True)}
    blocks: list[BlockSpec] = []
    for k in range(n_blocks):
        name = "contact" if k == 0 else f"b{k:02d}"
        nominal = float(rng.uniform(5.0, 120.0))
        times = {s: nominal * float(rng.normal(1.0, 0.02)) for s in sites}
        if k == 0:
            blocks.append(BlockSpec(name, times, 0.05, pinned=True))
            continue
        uses = tuple(r for r in LOCAL if rng.random() < 0.25)
        if rng.random() < 0.12:
            uses += (("rf_meter",) if rng.random() < 0.5 else ("hv_supply",))
        earlier = [b.name for b in blocks[1:]]
        after = ("contact",) + tuple(d for d in earlier if rng.random() < 0.04)
        blocks.append(BlockSpec(name, times, round(float(rng.uniform(0.1, 1.4)), 2), uses,
                                after))
    return PlanSpec(sites, tuple(blocks), shared, power_w=3.0, parallel=3)


def rf_lot(seed: int = 1, n_sites: int = 4) -> PlanSpec:
    """12 blocks: contact (pinned), four RF blocks on one shared meter, seven others on
    three per-site instruments; a per-site power limit."""
    rng = np.random.default_rng([seed, 12])
    sites = tuple(range(1, n_sites + 1))
    names = ["contact", "dc_leak", "idd_static", "pll_lock", "adc_lin", "dac_lin",
             "rf_tx_pwr", "rf_tx_evm", "rf_rx_sens", "rf_rx_iip3", "scan_a", "mbist"]
    uses = {"dc_leak": ("dc_unit",), "idd_static": ("dc_unit",), "pll_lock": ("clock_gen",),
            "adc_lin": ("mixed_sig",), "dac_lin": ("mixed_sig",),
            "rf_tx_pwr": ("rf_meter",), "rf_tx_evm": ("rf_meter", "clock_gen"),
            "rf_rx_sens": ("rf_meter",), "rf_rx_iip3": ("rf_meter", "mixed_sig"),
            "scan_a": ("clock_gen",), "mbist": ()}
    blocks = []
    for name in names:
        nominal = float(rng.uniform(8.0, 60.0)) if name != "contact" else 12.0
        times = {s: nominal * float(rng.normal(1.0, 0.02)) for s in sites}
        if name == "contact":
            blocks.append(BlockSpec(name, times, 0.05, pinned=True))
        else:
            blocks.append(BlockSpec(name, times, round(float(rng.uniform(0.2, 1.2)), 2),
                                    uses[name], ("contact",)))
    return PlanSpec(sites, tuple(blocks), {"rf_meter": PoolSpec(1, True)}, power_w=2.5,
                    parallel=3)


def write_lot(spec: PlanSpec, folder: Path, lot_id: str, touchdowns: int = 20,
              seed: int = 0) -> tuple[Path, Path]:
    """``<lot_id>.csv`` (every part runs every block, serial in program order, 1 % noise)
    and ``blocks.toml`` (the spec's limits, resources and blocks) in ``folder``."""
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    lines = ["lot_id,touchdown,site,part_id,block,start_ms,end_ms"]
    part = 0
    for td in range(touchdowns):
        for s in spec.sites:
            part += 1
            t = 2.0
            for b in spec.blocks:
                d = b.times_ms[s] * float(rng.normal(1.0, 0.01))
                lines.append(f"{lot_id},{td},{s},{part},{b.name},{t:.3f},{t + d:.3f}")
                t += d
    csv = folder / f"{lot_id}.csv"
    csv.write_text("\n".join(lines) + "\n", encoding="utf-8")
    toml = ["# Invented block map for a generated planning instance.", "", "[limits]"]
    if spec.power_w is not None:
        toml.append(f"power_w = {spec.power_w}")
    if spec.parallel is not None:
        toml.append(f"parallel = {spec.parallel}")
    if spec.touchdown_power_w is not None:
        toml.append(f"touchdown_power_w = {spec.touchdown_power_w}")
    held = sorted({u for b in spec.blocks for u in b.uses})
    for u in held:
        pool = spec.resources.get(u, PoolSpec())
        toml += ["", f"[resource.{u}]", f"count = {pool.count}",
                 f"shared = {'true' if pool.shared else 'false'}"]
    for b in spec.blocks:
        toml += ["", f"[block.{b.name}]", f"uses = {list(b.uses)!r}".replace("'", '"'),
                 f"power_w = {b.power_w}", f"after = {list(b.after)!r}".replace("'", '"'),
                 f"pinned = {'true' if b.pinned else 'false'}"]
    path = folder / "blocks.toml"
    path.write_text("\n".join(toml) + "\n", encoding="utf-8")
    return csv, path
