"""Units: which part record stands for each unit of a lot, which units of two lots are the
same, their paired differences, and the units whose bin or pass/fail changed.

A unit tested more than once in a lot (a retest, or one log stored twice) keeps its last
test: files in start order, then PRR order. Units are keyed by ``part_id``, or by the die
position ``x,y`` (one wafer per lot: a position seen twice in a lot is one unit).
"""

from __future__ import annotations

import polars as pl

MATCHES = ("part_id", "xy", "none")
KEY = ["test_num", "record", "elem"]  # one test; elem = MPR element, -1 for PTR and FTR


def unit_expr(key: str | None) -> pl.Expr:
    if key == "part_id":
        return pl.col("part_id").cast(pl.String)
    if key == "xy":
        return pl.concat_str([pl.col("x").cast(pl.String), pl.col("y").cast(pl.String)],
                             separator=",")
    return pl.lit(None, dtype=pl.String)


def identity(parts: pl.DataFrame, match: str) -> str | None:
    """The key that names a unit of this lot: the match key, else (``--match none``) the
    part id when every part has one, else the die position when every part has one."""
    if match != "none":
        return match
    for key, cols in (("part_id", ["part_id"]), ("xy", ["x", "y"])):
        if parts.height and all(parts[c].null_count() == 0 for c in cols):
            return key
    return None


def latest(parts: pl.DataFrame, files: pl.DataFrame, key: str | None
           ) -> tuple[pl.DataFrame, int]:
    """One row per unit (its last test) with a ``unit`` column, and how many earlier tests
    were superseded. Parts without the key stay, each its own unit, never matched."""
    rank = files.select("file_id").with_row_index("file_rank")
    p = (parts.join(rank, on="file_id", how="left")
         .with_columns(unit_expr(key).alias("unit"))
         .sort("file_rank", "part_index", nulls_last=False))
    keyed = p.filter(pl.col("unit").is_not_null())
    last = keyed.group_by("unit", maintain_order=True).last()
    kept = pl.concat([last.select(p.columns), p.filter(pl.col("unit").is_null())])
    return kept.sort("file_rank", "part_index"), keyed.height - last.height


def pairs(base: pl.DataFrame, cand: pl.DataFrame) -> pl.DataFrame:
    """Units in both lots: the baseline's columns, the candidate's with suffix ``_c``."""
    cols = ["unit", "file_id", "part_index", "site", "part_id", "x", "y", "hard_bin",
            "soft_bin", "passed"]
    b = base.filter(pl.col("unit").is_not_null()).select(cols)
    c = cand.filter(pl.col("unit").is_not_null()).select(cols)
    return b.join(c, on="unit", how="inner", suffix="_c").sort("file_id", "part_index")


def paired_differences(b_tests: pl.DataFrame, c_tests: pl.DataFrame) -> pl.DataFrame:
    """Per test over matched units with in-limit values on both sides: how many pairs, the
    mean and standard deviation of candidate minus baseline, and the differences."""
    cols = ["unit", *KEY, "value"]
    b = b_tests.filter(pl.col("inlim") & pl.col("unit").is_not_null()).select(cols)
    c = c_tests.filter(pl.col("inlim") & pl.col("unit").is_not_null()).select(cols)
    d = b.join(c, on=["unit", *KEY], how="inner", suffix="_c")
    return (d.with_columns((pl.col("value_c") - pl.col("value")).alias("diff"))
            .group_by(KEY).agg(pl.len().alias("paired_n"),
                               pl.col("diff").mean().alias("paired_mean_diff"),
                               pl.col("diff").std().alias("paired_sd_diff"),
                               pl.col("diff").alias("diffs")))


def changed(matched: pl.DataFrame, b_tests: pl.DataFrame, c_tests: pl.DataFrame,
            common: pl.DataFrame) -> list[dict[str, object]]:
    """Matched units whose hard bin, soft bin or pass/fail differ, each with the first test
    (in the candidate's program order) whose pass/fail differs, among the tests both lots ran."""
    moved = matched.filter(pl.col("hard_bin").ne_missing(pl.col("hard_bin_c"))
                           | pl.col("soft_bin").ne_missing(pl.col("soft_bin_c"))
                           | pl.col("passed").ne_missing(pl.col("passed_c")))
    if moved.is_empty():
        return []
    units = moved.select("unit")
    cols = ["unit", *KEY, "test_name", "value", "fail", "rec_index"]
    b = b_tests.join(units, on="unit").join(common, on=KEY).select(cols)
    c = c_tests.join(units, on="unit").join(common, on=KEY).select(cols)
    both = b.join(c, on=["unit", *KEY], how="full", coalesce=True, suffix="_c")
    first = (both.filter(pl.col("fail").ne_missing(pl.col("fail_c")))
             .sort(pl.coalesce("rec_index_c", "rec_index"), "test_num", "elem")
             .group_by("unit", maintain_order=True).first())
    by_unit = {r["unit"]: r for r in first.iter_rows(named=True)}
    return [_changed_row(r, by_unit.get(r["unit"])) for r in moved.iter_rows(named=True)]


def _changed_row(r: dict[str, object], t: dict[str, object] | None) -> dict[str, object]:
    was, now = r["passed"], r["passed_c"]
    kind = ("pass->fail" if was is True and now is False else
            "fail->pass" if was is False and now is True else "bin")
    out: dict[str, object] = {
        "part_id": r["part_id_c"] if r["part_id_c"] is not None else r["part_id"],
        "x": r["x_c"], "y": r["y_c"], "site_baseline": r["site"], "site_candidate": r["site_c"],
        "change": kind, "baseline_hard_bin": r["hard_bin"], "candidate_hard_bin": r["hard_bin_c"],
        "baseline_soft_bin": r["soft_bin"], "candidate_soft_bin": r["soft_bin_c"],
        "baseline_passed": was, "candidate_passed": now,
        "first_test_num": None, "first_test_name": None, "first_element": None,
        "baseline_value": None, "candidate_value": None}
    if t is not None:
        out |= {"first_test_num": t["test_num"],
                "first_test_name": t["test_name_c"] or t["test_name"],
                "first_element": None if t["elem"] == -1 else t["elem"],
                "baseline_value": t["value"], "candidate_value": t["value_c"]}
    return out
