"""Where the seconds go: block times by source, reconciliation, the multi-site view.

Ground truth is the generator's own account (sample_logs/truth.json: the block times it
realised per part); percentiles are checked against numpy, views against a polars
recomputation from the raw Parquet.
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest

from pipeline.attribute import timing
from tests.conftest import MARKERS_LE, TIMING_CSV, TOTALS_ONLY, TSR_ONLY, file_truth, raw_parquet


@pytest.fixture(scope="module")
def store(sample_store):  # type: ignore[no-untyped-def]
    pass  # derived when the logs landed
    return sample_store


def _truth_means(name: str) -> dict[tuple[str, int], float]:
    """(block, site) -> the realised mean ms the generator wrote."""
    out = {}
    for block, per_site in file_truth(name)["block_ms"].items():
        for site, v in per_site.items():
            out[(block, int(site))] = v["realised_mean_ms"]
    return out


def _bt(store, lot: str, method: str) -> pl.DataFrame:  # type: ignore[no-untyped-def]
    return store.sql("select * from block_times_all where lot_id = ? and method = ?",
                     [lot, method])


@pytest.mark.parametrize("name,method", [(MARKERS_LE, "marker"), (TIMING_CSV, "csv"),
                                         (TSR_ONLY, "tsr")])
def test_measured_sources_match_truth_within_1pct(store, name, method):  # type: ignore[no-untyped-def]
    lot = file_truth(name)["lot_id"]
    truth = _truth_means(name)
    got = _bt(store, lot, method).filter(pl.col("site").is_not_null())
    assert got.height == len(truth)
    for r in got.iter_rows(named=True):
        want = truth[(r["block"], r["site"])]
        assert r["mean_ms"] == pytest.approx(want, rel=0.01), (r["block"], r["site"])


def test_best_source_wins_and_others_stay_queryable(store):  # type: ignore[no-untyped-def]
    lot = file_truth(MARKERS_LE)["lot_id"]
    methods = set(store.sql("select distinct method from block_times_all where lot_id = ?",
                            [lot])["method"].to_list())
    assert {"marker", "tsr"} <= methods
    best = set(store.sql("select distinct method from block_times where lot_id = ?",
                         [lot])["method"].to_list())
    assert best == {"marker"}


def test_marker_percentiles_agree_with_numpy(store):  # type: ignore[no-untyped-def]
    lot = file_truth(MARKERS_LE)["lot_id"]
    per_part = store.sql("""select duration_ms from marker_times
                            where lot_id = ? and block = 'adc_linearity' and site = 3""", [lot])
    d = per_part["duration_ms"].to_numpy()
    row = _bt(store, lot, "marker").filter((pl.col("block") == "adc_linearity")
                                           & (pl.col("site") == 3)).row(0, named=True)
    # numpy's default percentile is linear interpolation, as DuckDB's quantile_cont.
    assert row["p50_ms"] == pytest.approx(np.percentile(d, 50), rel=1e-9)
    assert row["p95_ms"] == pytest.approx(np.percentile(d, 95), rel=1e-9)
    assert row["mean_ms"] == pytest.approx(d.mean(), rel=1e-9)
    assert row["parts"] == len(d)


def test_marker_times_agree_with_polars_on_raw_parquet(store):  # type: ignore[no-untyped-def]
    raw = raw_parquet(store.store.path, "dtr")
    fid = store.fid(MARKERS_LE)
    tt = (raw.filter(pl.col("file_id") == fid)
          .filter(pl.col("text_dat").str.starts_with("TT "))
          .with_columns(block=pl.col("text_dat").str.extract(r"block=(\S+)"),
                        start=pl.col("text_dat").str.extract(r"start_us=(\d+)").cast(pl.Int64),
                        end=pl.col("text_dat").str.extract(r"end_us=(\d+)").cast(pl.Int64))
          .group_by("block").agg(((pl.col("end") - pl.col("start")).mean() / 1000).alias("ms")))
    view = store.sql("""select block, avg(duration_ms) as ms from marker_times
                        where file_id = ? group by block""", [fid])
    joined = tt.join(view, on="block", suffix="_view")
    assert joined.height == 12
    assert np.allclose(joined["ms"].to_numpy(), joined["ms_view"].to_numpy(), rtol=1e-12)


def test_tsr_pooled_equals_sum_of_sites(store):  # type: ignore[no-untyped-def]
    lot = file_truth(TSR_ONLY)["lot_id"]
    df = _bt(store, lot, "tsr")
    pooled = df.filter(pl.col("site").is_null()).select("block", "total_ms")
    sites = df.filter(pl.col("site").is_not_null()).group_by("block").agg(pl.col("total_ms").sum())
    j = pooled.join(sites, on="block", suffix="_s")
    assert np.allclose(j["total_ms"].to_numpy(), j["total_ms_s"].to_numpy(), rtol=1e-9)


def test_estimate_within_10pct_for_identifiable_blocks(store):  # type: ignore[no-untyped-def]
    t = file_truth(TOTALS_ONLY)
    lot = t["lot_id"]
    est = _bt(store, lot, "estimate").filter(pl.col("site").is_null())
    assert est.height == len(t["block_ms"]) + 1  # every block and the overhead
    for r in est.iter_rows(named=True):
        assert r["identifiable"] == t["identifiable"][r["block"]], r["block"]
        if r["block"] == "overhead" or not r["identifiable"]:
            continue
        want = t["block_ms"][r["block"]]["1"]["realised_mean_ms"]
        assert r["mean_ms"] == pytest.approx(want, rel=0.10), r["block"]
        assert r["ci_low_ms"] <= r["mean_ms"] <= r["ci_high_ms"]


def test_estimate_warns_about_blocks_that_always_run_together(store):  # type: ignore[no-untyped-def]
    lot = file_truth(TOTALS_ONLY)["lot_id"]
    lines = timing.warnings(store.store, lot)
    assert len(lines) == 2  # one line per finding
    together = [ln for ln in lines if "flash_bist" in ln and "sram_bist" in ln]
    overhead = [ln for ln in lines if "contact" in ln and "overhead" in ln]
    assert len(together) == 1 and len(overhead) == 1 and together != overhead
    assert all(ln.startswith(f"{lot}: ") for ln in lines)


def test_reconciliation_unattributed_is_overhead_plus_waits(store):  # type: ignore[no-untyped-def]
    t = file_truth(MARKERS_LE)
    rec = timing.unattributed(store.store, t["lot_id"])
    pooled = rec.filter(pl.col("site").is_null()).row(0, named=True)
    assert pooled["method"] == "marker"
    # unattributed = part time - block time, by definition of the view
    assert pooled["unattributed_ms"] == pytest.approx(pooled["part_ms"] - pooled["attributed_ms"])
    # site 1 starts the shared RF meter first, so it waits least; waits grow with site
    per_site = rec.filter(pl.col("site").is_not_null()).sort("site")["unattributed_ms"]
    assert per_site.is_sorted()
    assert per_site[0] >= t["overhead_ms"]["realised_mean"] - 1.0


def test_estimate_overhead_is_unattributed(store):  # type: ignore[no-untyped-def]
    t = file_truth(TOTALS_ONLY)
    rec = timing.unattributed(store.store, t["lot_id"]).filter(pl.col("site").is_null())
    est = _bt(store, t["lot_id"], "estimate").filter(
        (pl.col("block") == "overhead") & pl.col("site").is_null())
    assert rec["unattributed_ms"][0] == pytest.approx(est["mean_ms"][0], rel=0.05)


def test_mse_worked_example():
    # Common practice: MSE = 1 - (T_N - T_1) / ((N - 1) T_1); T_1 = 1.0 s, N = 4,
    # T_4 = 1.3 s gives 1 - 0.3 / 3 = 90 %.
    assert timing.multi_site_efficiency(1000.0, 1300.0, 4) == pytest.approx(0.90)
    assert timing.multi_site_efficiency(1000.0, 1000.0, 4) == pytest.approx(1.0)
    assert timing.multi_site_efficiency(1000.0, 4000.0, 4) == pytest.approx(0.0)
    assert timing.multi_site_efficiency(1000.0, 1000.0, 1) is None


def test_sites_view_against_truth(store):  # type: ignore[no-untyped-def]
    t = file_truth(MARKERS_LE)
    (s,) = timing.site_summaries(store.store, t["lot_id"])
    assert s.sites == 4
    # the lot holds the log twice (little- and big-endian copies): 2 x 40 touchdowns
    assert s.touchdowns == 2 * t["touchdowns"]
    assert s.touchdown_ms == pytest.approx(np.mean(t["touchdown_ms"]), rel=0.01)
    one_site = sum(np.mean([v["realised_mean_ms"] for v in per.values()])
                   for per in t["block_ms"].values()) + t["overhead_ms"]["realised_mean"]
    assert s.one_site_ms == pytest.approx(one_site, rel=0.01)
    expected = 1 - (np.mean(t["touchdown_ms"]) - one_site) / (3 * one_site)
    assert s.mse == pytest.approx(expected, abs=0.01)
    assert s.serialized == ["radio_rx", "radio_tx"]  # the shared rf_meter's blocks
    imbalance = s.per_site.sort("site")["imbalance_pct"].to_list()
    assert imbalance[0] == 0 and imbalance[-1] > 5


def test_index_time_from_lot_clock(store):  # type: ignore[no-untyped-def]
    t = file_truth(TSR_ONLY)
    (s,) = timing.site_summaries(store.store, t["lot_id"])
    # MIR/MRR carry whole seconds: over n touchdowns the error is about 1000 / n ms.
    assert s.index_ms == pytest.approx(np.mean(t["index_ms"]["realised"]),
                                       abs=1000 / t["touchdowns"] + 1)


def test_block_table_is_a_ranked_pareto(store):  # type: ignore[no-untyped-def]
    lot = file_truth(MARKERS_LE)["lot_id"]
    tab = timing.block_table(store.store, lot)
    assert tab["mean_ms"].is_sorted(descending=True)
    assert np.allclose(tab["cum_pct"].to_numpy(), np.cumsum(tab["share_pct"].to_numpy()))
    assert {"site_1_ms", "site_4_ms"} <= set(tab.columns)


def test_unknown_lot_is_a_clear_error(store):  # type: ignore[no-untyped-def]
    from pipeline.errors import UsageError

    with pytest.raises(UsageError, match="NO-SUCH-LOT"):
        timing.block_table(store.store, "NO-SUCH-LOT")


def _drift_frame(values: list[float]) -> list[bool]:
    hist: list[float] = []
    flags = []
    for v in values:
        med = float(np.median(hist[-10:])) if len(hist) >= 3 else None
        if med is None:
            flags.append(False)
        else:
            sigma = max(1.4826 * float(np.median(np.abs(np.array(hist[-10:]) - med))),
                        0.005 * med)
            flags.append(abs(v - med) > 3 * sigma and abs(v - med) / med > 0.02)
        hist.append(v)
    return flags


def test_drift_flags_a_block_that_got_slower(tmp_path):  # type: ignore[no-untyped-def]
    """Five lots of one block, the last 10 % slower: only the last is flagged."""
    from pipeline import Store
    from tests.conftest import SAMPLES

    # Build lots from the timing CSV with the block time scaled per lot.
    base = (SAMPLES / TIMING_CSV).read_text().splitlines()
    header, rows = base[0], base[1:]
    cols = header.split(",")
    i_lot, i_blk = cols.index("lot_id"), cols.index("block")
    i_s, i_e = cols.index("start_ms"), cols.index("end_ms")
    factors = [1.0, 1.002, 0.998, 1.001, 1.10]
    for k, f in enumerate(factors):
        out = [header]
        for line in rows:
            c = line.split(",")
            c[i_lot] = f"DRIFT-{k}"
            if c[i_blk] == "pll_lock":
                c[i_e] = f"{float(c[i_s]) + f * (float(c[i_e]) - float(c[i_s])):.3f}"
            out.append(",".join(c))
        (tmp_path / f"lot{k}.csv").write_text("\n".join(out) + "\n")
    store = Store(tmp_path / "store")
    store.ingest([tmp_path])
    df = timing.drift(store).filter(pl.col("block") == "pll_lock").sort("lot_id")
    means = df["mean_ms"].to_list()
    assert df["is_flagged"].to_list() == _drift_frame(means) == [False] * 4 + [True]


def test_one_site_time_counts_overlapping_blocks_once(store):  # type: ignore[no-untyped-def]
    """T_1 for a concurrent program: blocks run at once count once (the union of their
    intervals), so its multi-site efficiency stays at most 100 %; a serial program's union
    is its blocks' sum."""
    from tests.conftest import CONCURRENT

    serial, concurrent = file_truth(MARKERS_LE)["lot_id"], file_truth(CONCURRENT)["lot_id"]
    spans = store.sql("""select lot_id, busy_ms, union_ms, idle_ms from part_spans
                         where lot_id in (?, ?)""", [serial, concurrent])
    s = spans.filter(pl.col("lot_id") == serial)
    c = spans.filter(pl.col("lot_id") == concurrent)
    assert np.allclose(s["union_ms"].to_numpy(), s["busy_ms"].to_numpy(), atol=1e-6)
    assert (c["union_ms"] <= c["busy_ms"] + 1e-6).all()
    assert (c["union_ms"] < 0.9 * c["busy_ms"]).mean() > 0.9  # the plan overlaps blocks
    assert (spans["idle_ms"] >= -1e-6).all()
    [summary] = timing.site_summaries(store.store, concurrent)
    assert summary.mse is not None and 0.9 < summary.mse <= 1.0
