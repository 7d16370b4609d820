"""``verify``: read two lots, compare their tests, units and time; the one entry point
behind `tandem verify`, the demo and the report's verification section."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import polars as pl

from ..errors import UsageError
from ..store import Store
from . import elapsed, queries, units
from .compare import (
    SHIFTED,
    TOO_FEW,
    VERDICTS,
    Rules,
    TestResult,
    compare_tests,
    histogram,
    test_values,
)
from .units import KEY, MATCHES

MAX_DISTRIBUTIONS = 6  # the moved tests whose before/after distributions are kept
CAUTIONS = (
    "'same' means no change was found with these units at this false discovery rate, not "
    "that the two programs are equivalent: a small correlation lot detects only large "
    "changes. Check the shifts, spreads and Cpk beside each verdict.",
    "A test that only one program runs, or whose limits changed, needs its own review: "
    "dropped or changed tests can let bad parts escape.",
    "A correlation run covers the material it tested: repeat it on known-good and "
    "known-bad parts, across sites and temperature, before the concurrent program "
    "reaches production, and follow your quality system and change control.",
)


@dataclass
class Verification:
    baseline: str
    candidate: str
    match: str
    rules: Rules
    programs: dict[str, dict[str, Any]]
    unit_counts: dict[str, Any]
    tests: list[TestResult]
    only: dict[str, list[dict[str, Any]]]
    changed_units: list[dict[str, Any]]
    time: dict[str, Any]
    notes: list[str] = field(default_factory=list)

    @property
    def fdr(self) -> float:
        return self.rules.fdr

    @property
    def matched_units(self) -> int:
        return int(self.unit_counts["matched"])

    def count(self, verdict: str) -> int:
        return sum(t.verdict == verdict for t in self.tests)

    @property
    def moved(self) -> list[TestResult]:
        return [t for t in self.tests if t.verdict == SHIFTED]

    def distributions(self) -> list[dict[str, Any]]:
        return [{"test_num": t.test_num, "element": t.element, "test_name": t.name,
                 "units": t.units, "bins": histogram(t)}
                for t in self.moved[:MAX_DISTRIBUTIONS]]

    def to_json(self) -> dict[str, Any]:
        return {
            "baseline": self.baseline, "candidate": self.candidate,
            "matched_units": self.matched_units, "match": self.match, **self.rules.to_json(),
            "programs": self.programs, "units": self.unit_counts,
            "summary": {"tests": len(self.tests)} | {
                v.replace(" ", "_"): self.count(v) for v in VERDICTS} | {
                "changed_units": len(self.changed_units)},
            "time": self.time, "tests": [t.to_json() for t in self.tests],
            "changed_units": self.changed_units,
            "only_in_baseline": self.only["baseline"], "only_in_candidate": self.only["candidate"],
            "distributions": self.distributions(), "notes": self.notes,
            "cautions": list(CAUTIONS)}


def verify(store: Store, baseline: str, candidate: str, match: str = "part_id",
           blocks: str | None = None, plan: dict[str, Any] | None = None,
           rules: Rules | None = None) -> Verification:
    """Compare the candidate lot (the concurrent program) with the baseline lot (the serial
    one). ``blocks``: a block map; the baseline lot is planned with it (as `tandem plan`
    does) for the projected saving, unless ``plan`` (its JSON dict) is given."""
    rules = rules or Rules()
    _check_args(baseline, candidate, match, rules)
    reader = queries.Reader(store)
    try:
        known = set(queries.lot_ids(reader))
        for lot in (baseline, candidate):
            if lot not in known:
                shown = ", ".join(sorted(known)[:8]) + (" ..." if len(known) > 8 else "")
                raise UsageError(f"{lot}: no such lot in {store.path} "
                                 f"(lots there: {shown or 'none'})")
        b, c = queries.read_lot(reader, baseline), queries.read_lot(reader, candidate)
    finally:
        reader.close()
    if plan is None and blocks is not None:
        from ..plan import make_plan

        plan = make_plan(store, blocks, baseline)
    return compare_lots(b, c, match, plan, rules)


def _check_args(baseline: str, candidate: str, match: str, rules: Rules) -> None:
    if match not in MATCHES:
        raise UsageError(f"--match must be one of {', '.join(MATCHES)}, not {match!r}")
    if not 0 < rules.fdr < 1:
        raise UsageError(f"--fdr must be between 0 and 1, not {rules.fdr:g}")
    if not rules.min_shift >= 0:
        raise UsageError(f"--min-shift must be 0 or more (sigmas), not {rules.min_shift:g}")
    if not rules.min_ratio >= 1:
        raise UsageError(f"--min-ratio must be 1 or more, not {rules.min_ratio:g}")
    if baseline == candidate:
        raise UsageError(f"--baseline and --candidate are the same lot ({baseline}): a "
                         "verification compares two lots, the serial and the concurrent run")


def compare_lots(b: queries.LotData, c: queries.LotData, match: str = "part_id",
                 plan: dict[str, Any] | None = None, rules: Rules | None = None
                 ) -> Verification:
    """The pure part of ``verify``: two lots as read, compared."""
    rules = rules or Rules()
    _check_args(b.lot_id, c.lot_id, match, rules)
    kb, kc = units.identity(b.parts, match), units.identity(c.parts, match)
    kept_b, gone_b = units.latest(b.parts, b.files, kb)
    kept_c, gone_c = units.latest(c.parts, c.files, kc)
    tv_b, tv_c = test_values(b.results, kept_b), test_values(c.results, kept_c)
    common = tv_b.select(KEY).unique().join(tv_c.select(KEY).unique(), on=KEY)
    if common.is_empty():
        raise UsageError(f"lots {b.lot_id} and {c.lot_id} have no test in common "
                         f"({_tests(tv_b)} and {_tests(tv_c)}): nothing to compare")
    matched = units.pairs(kept_b, kept_c) if match != "none" else kept_b.head(0)
    paired = units.paired_differences(tv_b, tv_c) if match != "none" else None
    tests = compare_tests(tv_b, tv_c, rules, paired)
    changed = (units.changed(units.pairs(kept_b, kept_c), tv_b, tv_c, common)
               if match != "none" else [])
    counts = {"baseline": kept_b.height, "candidate": kept_c.height,
              "matched": matched.height if match != "none" else 0,
              "baseline_superseded": gone_b, "candidate_superseded": gone_c,
              "baseline_key": kb, "candidate_key": kc}
    v = Verification(b.lot_id, c.lot_id, match, rules, {"baseline": _program(b),
                     "candidate": _program(c)}, counts, tests, _only(tv_b, tv_c), changed,
                     elapsed.compare_time(b, c, plan))
    v.notes = _notes(v)
    return v


def _tests(tv: pl.DataFrame) -> str:
    n = tv.select(KEY).unique().height
    return f"{n} test{'s' if n != 1 else ''}"


def _program(lot: queries.LotData) -> dict[str, Any]:
    f = lot.files.head(1).to_dicts()
    first = f[0] if f else {}
    return {"lot_id": lot.lot_id, "program": first.get("program"),
            "program_rev": first.get("program_rev"), "part_type": first.get("part_type"),
            "files": lot.files.height, "parts": lot.parts.height}


def _only(tv_b: pl.DataFrame, tv_c: pl.DataFrame) -> dict[str, list[dict[str, Any]]]:
    def listing(a: pl.DataFrame, other: pl.DataFrame) -> list[dict[str, Any]]:
        names = (a.group_by(KEY, maintain_order=True)
                 .agg(pl.col("test_name").drop_nulls().first(), pl.col("block").first())
                 .join(other.select(KEY).unique(), on=KEY, how="anti").sort(KEY))
        return [{"test_num": r["test_num"], "record": r["record"],
                 "element": None if r["elem"] == -1 else r["elem"],
                 "test_name": r["test_name"], "block": r["block"]}
                for r in names.iter_rows(named=True)]
    return {"baseline": listing(tv_b, tv_c), "candidate": listing(tv_c, tv_b)}


def _notes(v: Verification) -> list[str]:
    out = []
    u = v.unit_counts
    for side in ("baseline", "candidate"):
        if u[f"{side}_superseded"]:
            out.append(f"{side}: {u[f'{side}_superseded']} earlier test(s) of a unit "
                       f"superseded by a later one (retest or a log stored twice): the "
                       "last test of each unit counts")
    if v.match != "none" and u["matched"] == 0:
        out.append(f"no unit matched by {v.match}: paired differences and changed units "
                   "need units the two lots share (try --match xy or part_id)")
    elif v.match != "none" and u["matched"] < min(u["baseline"], u["candidate"]):
        out.append(f"{u['matched']} units matched by {v.match} of {u['baseline']} "
                   f"(baseline) and {u['candidate']} (candidate)")
    changed = sum(t.to_json()["limits_changed"] for t in v.tests)
    if changed:
        out.append(f"{changed} test(s) have other limits in the candidate program: each "
                   "lot's own limits decide its fails and Cpk")
    if v.count(TOO_FEW):
        out.append(f"{v.count(TOO_FEW)} test(s) had too few results to compare")
    t = v.time
    if t["baseline_sites"] and t["candidate_sites"] and t["baseline_sites"] != t["candidate_sites"]:
        out.append("the lots test a different number of sites per touchdown: compare the "
                   "per-unit saving (per_unit_saving_pct)")
    if t["baseline_method"] != t["candidate_method"]:
        out.append(f"touchdown times come from {t['baseline_method']} (baseline) and "
                   f"{t['candidate_method']} (candidate)")
    return out
