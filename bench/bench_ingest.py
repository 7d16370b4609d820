"""Ingest benchmark: Tandem against a plain per-field ``struct`` decoder, same run.

``make bench`` runs it. It is a measurement, not a test: it prints what it measured and
exits 0 whether or not the targets are met.

1. The logs (``stdf_gen.py``): ``standard``, the file of the first releases (~100 MB,
   2 M records, little-endian), and ``dense``, a production-like log (~100 MB, 4.5 M
   records, most later PTRs cut after RESULT, BPS/EPS per block, 22 k parts, 4 sites) in
   both byte orders (``dense``, ``dense-be``). Each is generated once into ``bench/out/``
   (again when missing or when its profile's version changes), in a child process.
2. Tandem: ``tandem ingest FILE --store TMP --json`` as a whole process (start-up, store
   writing and commit included), ``--runs`` times on fresh stores, half before the
   baseline and half after it; the median counts.
3. The in-process ``Decoder`` alone, on each path (compiled, numpy).
4. Phases, each timed on its own on one thread: read (the file in 8 MB reads, hashed,
   as ingest reads a new log), scan (record boundaries), structure, decode and defaults
   (the compiled engine run three ways: structure and context columns only, plus every
   field, plus default data; each phase is the difference), other (the rest of the
   Decoder: damage checks, Arrow arrays, results held for their part), write (every
   decoded table through the store's staging writer), derive (the log's per-file models)
   and commit (its lot's models, and publishing the lot's new generation). The whole process
   overlaps decoding with writing (the writer has its own thread), so it takes less
   than the sum.
5. Baseline: the decoder one writes first (``baseline_decode``), in this process.
6. A table on stdout per file, and every figure in ``bench/out/last.json``.

Peak RSS is the child's ``ru_maxrss`` from ``os.wait4``. Linux starts a child's
``maxrss`` at its parent's high-water mark when it execs, so the runs are started by a
small runner process (not by this one, which grows with the logs and the baseline), and
the runner's own mark is reported as the floor of the figure. The runs use Python's
bytecode cache as a user's runs do (``PYTHONDONTWRITEBYTECODE`` is cleared for them).
The machine's load average is printed beside the figures: times drift with it, ratios
taken within one run much less.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import shutil
import statistics
import struct
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

OUT = Path(__file__).resolve().parent / "out"
SLICE = 8 << 20
FILES = {"standard": ("standard", "<"), "dense": ("dense", "<"), "dense-be": ("dense", ">")}
# The targets: whole-process ingest vs the baseline on the dense logs, and peak RSS.
RATIO_TARGET, RSS_TARGET_MB = 25.0, 500.0


# -- the logs ---------------------------------------------------------------------------
def _profile(key: str) -> tuple[Any, str, Path, Path]:
    import stdf_gen
    name, endian = FILES[key]
    prof = stdf_gen.PROFILES[name]
    stem = prof.stem(endian)
    return prof, endian, OUT / f"{stem}.stdf", OUT / f"{stem}.meta.json"


def ensure_file(key: str, regen: bool) -> tuple[Path, dict[str, Any]]:
    """The cached log and its description; generates it in a child process when needed
    (this process stays small, see the module note on RSS)."""
    prof, _, data, meta_path = _profile(key)
    try:
        meta = json.loads(meta_path.read_text())
        fresh = (meta.get("generator_version") == prof.version
                 and meta.get("profile", "standard") == prof.name
                 and data.stat().st_size == meta.get("bytes"))
    except (OSError, ValueError):
        fresh = False
    if not fresh or regen:
        OUT.mkdir(parents=True, exist_ok=True)
        print(f"generating {data.name} ({prof.name} v{prof.version}) ...", flush=True)
        t0 = time.perf_counter()
        subprocess.run([sys.executable, __file__, "--generate-only", key], check=True)
        print(f"  generated in {time.perf_counter() - t0:.1f} s", flush=True)
        meta = json.loads(meta_path.read_text())
    return data, meta


def _generate(key: str) -> None:
    import stdf_gen
    prof, endian, data, meta_path = _profile(key)
    t0 = time.perf_counter()
    meta = stdf_gen.generate(prof, data, endian)
    meta["generate_s"] = round(time.perf_counter() - t0, 2)
    stdf_gen.write_meta(meta, meta_path)


# -- baseline: the decoder one writes first -------------------------------------------
def baseline_decode(data: bytes) -> tuple[int, dict[str, list[dict[str, Any]]]]:
    """Walk the records with ``struct.unpack_from`` on the header; decode every field of
    PTR/FTR/MPR/PIR/PRR/DTR into a dict, field by field from the catalogue; skip the rest
    by length. Straightforward, not deliberately slowed."""
    from pipeline.read.stdf.records import BY_NAME
    endian = "<" if data[:2] == b"\x02\x00" else ">"
    wanted = {BY_NAME[n].key: BY_NAME[n] for n in ("PTR", "FTR", "MPR", "PIR", "PRR", "DTR")}
    out: dict[str, list[dict[str, Any]]] = {r.name: [] for r in wanted.values()}
    pos, n, records = 0, len(data), 0
    while pos + 4 <= n:
        ln, typ, sub = struct.unpack_from(endian + "HBB", data, pos)
        end = pos + 4 + ln
        if end > n:
            break
        rec = wanted.get((typ, sub))
        if rec is not None:
            out[rec.name].append(_baseline_fields(rec, data, pos + 4, end, endian))
        records += 1
        pos = end
    return records, out


_CODES = {"U1": "B", "U2": "H", "U4": "I", "I1": "b", "I2": "h", "I4": "i", "R4": "f",
          "R8": "d", "B1": "B"}
_SIZES = {"B": 1, "H": 2, "I": 4, "b": 1, "h": 2, "i": 4, "f": 4, "d": 8}


def _baseline_fields(rec: Any, data: bytes, pos: int, end: int, e: str) -> dict[str, Any]:
    d: dict[str, Any] = {}
    for f in rec.fields:
        if pos >= end:
            break  # omitted trailing fields
        t = f.type
        if f.is_array:
            k = d.get(f.count, 0)
            if t == "N1":
                d[f.name] = [(data[pos + i // 2] >> (4 * (i % 2))) & 0x0F for i in range(k)]
                pos += (k + 1) // 2
            else:
                c = _CODES[t]
                vals = []
                for _ in range(k):
                    vals.append(struct.unpack_from(e + c, data, pos)[0])
                    pos += _SIZES[c]
                d[f.name] = vals
        elif t in _CODES:
            c = _CODES[t]
            d[f.name] = struct.unpack_from(e + c, data, pos)[0]
            pos += _SIZES[c]
        elif t == "C1":
            d[f.name] = chr(data[pos])
            pos += 1
        elif t in ("Cn", "Bn"):
            ln = data[pos]
            raw = data[pos + 1:pos + 1 + ln]
            d[f.name] = raw.decode("latin-1") if t == "Cn" else raw
            pos += 1 + ln
        elif t == "Dn":
            nbytes = (struct.unpack_from(e + "H", data, pos)[0] + 7) // 8
            d[f.name] = data[pos + 2:pos + 2 + nbytes]
            pos += 2 + nbytes
    return d


# -- measurements --------------------------------------------------------------------
def _tandem_cmd() -> list[str] | None:
    exe = Path(sys.executable).with_name("tandem")
    cmd = [str(exe)] if exe.exists() else ([w] if (w := shutil.which("tandem")) else None)
    if cmd is None:
        return None
    try:
        help_ = subprocess.run([*cmd, "ingest", "--help"], capture_output=True, text=True,
                               timeout=60)
    except (OSError, subprocess.TimeoutExpired):
        return None
    return cmd if help_.returncode == 0 and "--store" in help_.stdout else None


# A small process that starts every `tandem ingest` run and reports its wall time and
# peak RSS (module note): it stays small, so the figure is Tandem's own.
_RUNNER = r"""
import json, os, subprocess, sys, tempfile, time
for line in sys.stdin:
    argv = json.loads(line)
    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        t0 = time.perf_counter()
        p = subprocess.Popen(argv, stdout=out, stderr=err)
        _, status, usage = os.wait4(p.pid, 0)
        sec = time.perf_counter() - t0
        out.seek(0)
        err.seek(0)
        print(json.dumps({"seconds": sec, "rc": os.waitstatus_to_exitcode(status),
                          "rss_kb": usage.ru_maxrss, "self_rss_kb": 0,
                          "stdout": out.read().decode(errors="replace"),
                          "stderr": err.read().decode(errors="replace")[-2000:]}),
              flush=True)
"""


class Runner:
    def __init__(self) -> None:
        # Python's usual bytecode cache for the runs: a user's second run does not compile
        # Tandem's modules again, so neither do these (PYTHONDONTWRITEBYTECODE cleared).
        env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
        self.p = subprocess.Popen([sys.executable, "-c", _RUNNER], stdin=subprocess.PIPE,
                                  stdout=subprocess.PIPE, text=True, env=env)

    def run(self, argv: list[str]) -> dict[str, Any]:
        assert self.p.stdin is not None and self.p.stdout is not None
        self.p.stdin.write(json.dumps(argv) + "\n")
        self.p.stdin.flush()
        return json.loads(self.p.stdout.readline())

    def floor_mb(self) -> float:
        """The runner's own peak RSS so far (Linux VmHWM): the floor of every figure."""
        try:
            status = Path(f"/proc/{self.p.pid}/status").read_text()
        except OSError:
            return 0.0
        kb = [int(x.split()[1]) for x in status.splitlines() if x.startswith("VmHWM:")]
        return kb[0] / 1024 if kb else 0.0

    def close(self) -> None:
        assert self.p.stdin is not None
        self.p.stdin.close()
        self.p.wait()


def run_tandem(runner: Runner, cmd: list[str], path: Path, runs: int) -> dict[str, Any]:
    """Whole-process ingest runs, each on a fresh store: wall seconds and peak RSS."""
    times, rss, reports = [], [], []
    for _ in range(runs):
        store = Path(tempfile.mkdtemp(prefix="tandem-bench-"))
        try:
            got = runner.run([*cmd, "ingest", str(path), "--store", str(store / "s"), "--json"])
        finally:
            shutil.rmtree(store, ignore_errors=True)
        if got["rc"] != 0:
            tail = got["stderr"].strip().splitlines()[-3:]
            raise RuntimeError(f"tandem ingest exited {got['rc']}: {' | '.join(tail)}")
        times.append(got["seconds"])
        rss.append(got["rss_kb"] / 1024)  # kB on Linux
        reports.append(json.loads(got["stdout"]))
    return {"seconds": times, "rss_mb": rss, "report": reports[-1]}


def _feed(data: bytes, path: str | None) -> tuple[Any, list[tuple[str, Any]]]:
    from pipeline.read.stdf.decoder import Decoder
    d = Decoder(path=path) if path else Decoder()
    got: list[tuple[str, Any]] = []
    mv = memoryview(data)
    for i in range(0, len(data), SLICE):
        got += d.feed(mv[i:i + SLICE])
    got += d.close()
    return d, got


def run_decoder(data: bytes, path: str | None, profile: bool) -> dict[str, Any]:
    """The in-process Decoder alone: 8 MB slices, close, no store."""
    t0 = time.perf_counter()
    d, got = _feed(data, path)
    sec = time.perf_counter() - t0
    if profile:
        import cProfile
        import pstats
        prof = cProfile.Profile()
        prof.runcall(_feed, data, path)
        print(f"\nDecoder profile, {getattr(d, 'path', 'default')} path (top 10 by own time):")
        pstats.Stats(prof).sort_stats("tottime").print_stats(10)
    return {"seconds": sec, "records": d.records, "rows": sum(t.num_rows for _, t in got),
            "damage": d.damage, "path": getattr(d, "path", "c")}


def run_baseline(data: bytes, limit_mb: float | None) -> dict[str, Any]:
    part = data
    if limit_mb:
        part = data[:int(limit_mb * 1e6)]
    t0 = time.perf_counter()
    records, out = baseline_decode(part)
    sec = time.perf_counter() - t0
    decoded = sum(len(v) for v in out.values())
    del out
    return {"seconds": sec, "bytes": len(part), "records": records, "decoded": decoded,
            "scope": "whole file" if part is data else f"first {len(part) / 1e6:.0f} MB"}


# -- phases ------------------------------------------------------------------------------
def _timer() -> Any:
    t0 = time.perf_counter()
    return lambda: time.perf_counter() - t0


def phases(path: Path, data: bytes) -> dict[str, float | None]:
    """Each phase of an ingest on its own, one thread, in seconds (module note, 4)."""
    from pipeline.read.stdf.scan import scan
    out: dict[str, float | None] = {}
    took = _timer()
    h = hashlib.sha256()
    with open(path, "rb") as f:
        while chunk := f.read(SLICE):
            h.update(chunk)
    out["read"] = took()
    big = data[:2] == b"\x00\x02"
    took, batches, pos = _timer(), [], 0
    mv = memoryview(data)
    while pos < len(data):
        offs, lens, _, _, end = scan(mv[pos:pos + SLICE], 0, big)
        batches.append((pos, end, offs, lens))
        pos += end if end else len(data)
    out["scan"] = took()
    out.update(_engine_phases(mv, batches, big))
    took = _timer()
    dec, got = _feed(data, None)
    total = took()
    known = sum(v for k, v in out.items() if k in ("scan", "structure", "decode", "defaults")
                and v is not None)
    out["other"] = max(total - known, 0.0) if out.get("structure") is not None else None
    out["decoder_total"] = total
    out.update(_write_and_commit(dec, got))
    return out


def _engine_phases(mv: memoryview, batches: list, big: bool) -> dict[str, float | None]:
    """The compiled engine three ways: structure only, + fields, + default data."""
    try:
        import numpy as np

        from pipeline.read.stdf import compiled, native
        from pipeline.read.stdf.columnar import layout
        from pipeline.read.stdf.records import RECORDS
    except ImportError:
        return {"structure": None, "decode": None, "defaults": None}
    if not native.available():
        return {"structure": None, "decode": None, "defaults": None}
    full = native._specs()
    plain = [(k, role, None if lay is None else layout(RECORDS[(k >> 8, k & 255)]), -1, -1)
             for k, role, lay, _, _ in full]
    bare = [(k, role, None, -1, -1) for k, role, _, _, _ in full]

    def run(specs: list) -> float:
        e = compiled.EXT.Engine(int(big), 64, specs)  # type: ignore[union-attr]
        took, rec = _timer(), 0
        for pos, end, offs, lens in batches:
            e.batch(mv[pos:pos + end], offs, lens.astype(np.int64), rec)
            rec += len(offs)
        return took()

    t_bare, t_plain, t_full = run(bare), run(plain), run(full)
    return {"structure": t_bare, "decode": max(t_plain - t_bare, 0.0),
            "defaults": max(t_full - t_plain, 0.0)}


def _write_and_commit(dec: Any, got: list[tuple[str, Any]]) -> dict[str, float | None]:
    """The decoded tables through the store's staging writer, the log's per-file
    derivation, then the commit (its lot's derivation and the publishing)."""
    from pipeline.jobs.decode import derive_staged, stage
    from pipeline.jobs.derivation import local_runner
    from pipeline.jobs.ingest import registry_fields
    from pipeline.store import Store
    from pipeline.store.commit import Incoming, Share

    root = Path(tempfile.mkdtemp(prefix="tandem-bench-phases-"))
    try:
        store = Store(root / "s")
        with store.writer():  # as ingest stages and commits: under the lock
            fid = "0123456789abcdef"
            staged = stage(str(store.path), fid)
            took = _timer()
            for name, table in got:
                staged.write(name, table)
            staged.close()
            write = took()
            entry = {"path": "bench", "file_id": fid, "sha256": "0" * 64, "format": "stdf",
                     "status": "ok", "records": dec.records,
                     "parts": staged.rows.get("parts", 0), "size_bytes": 0}
            took = _timer()
            done = derive_staged(store.path, staged, entry, None)
            derive = took()
            shares = [Share(lot, {t: staged.root / d for t, d in tables.items()},
                            {m: staged.root / f for m, f in done.derived[lot].items()})
                      for lot, tables in done.shares.items()]
            took = _timer()
            store.commit([Incoming(registry_fields(entry), shares, staged.root)],
                         local_runner())
            commit = took()
        return {"write": write, "derive": derive, "commit": commit}
    finally:
        shutil.rmtree(root, ignore_errors=True)


def start_up(runner: Runner, cmd: list[str]) -> float:
    """Whole-process ingest of a log holding only a FAR: start-up, store and commit."""
    root = Path(tempfile.mkdtemp(prefix="tandem-bench-tiny-"))
    try:
        tiny = root / "far_only.stdf"
        tiny.write_bytes(struct.pack("<HBBBB", 2, 0, 10, 2, 4))  # STDF V4, FAR 0/10
        times = []
        for i in range(2):  # the first run may still write Python's bytecode cache
            store = root / f"s{i}"
            times.append(float(runner.run([*cmd, "ingest", str(tiny), "--store",
                                           str(store)])["seconds"]))
        return times[-1]
    finally:
        shutil.rmtree(root, ignore_errors=True)


# -- report --------------------------------------------------------------------------
PHASES = ("read", "scan", "structure", "decode", "defaults", "other", "write", "derive",
          "commit")


def report_file(key: str, meta: dict[str, Any], tandem: dict[str, Any] | None,
                decoders: list[dict[str, Any]], base: dict[str, Any],
                ph: dict[str, float | None], floor_mb: float, start_s: float | None,
                load: float) -> dict[str, Any]:
    mb = meta["bytes"] / 1e6
    base_mbs = base["bytes"] / 1e6 / base["seconds"]
    res: dict[str, Any] = {
        "file": meta.get("file"), "profile": meta.get("profile", "standard"),
        "byte_order": meta.get("byte_order", "little"), "file_mb": round(mb, 2),
        "records": meta["records"], "parts": meta["parts"], "load_avg": round(load, 2),
        "baseline_mb_s": round(base_mbs, 2), "baseline_scope": base["scope"],
        "baseline_s": round(base["seconds"], 3),
        "decoder_only": {d["path"]: {"s": round(d["seconds"], 3),
                                    "mb_s": round(mb / d["seconds"], 1),
                                    "ratio": round(mb / d["seconds"] / base_mbs, 1)}
                         for d in decoders},
        "phases_s": {k: None if ph.get(k) is None else round(ph[k], 3)  # type: ignore[arg-type]
                     for k in (*PHASES, "decoder_total")},
        "start_up_s": None if start_s is None else round(start_s, 3),
    }
    title = f"{meta['profile'] if 'profile' in meta else 'standard'} " \
            f"{'big' if res['byte_order'] == 'big' else 'little'}-endian"
    lines = [f"== {key} ({title}): {mb:.1f} MB, {meta['records']:,} records, "
             f"{meta['parts']:,} parts; load average {load:.2f}",
             f"baseline       {base_mbs:8.1f} MB/s  ({base['seconds']:.2f} s, {base['scope']})"]
    for d in decoders:
        r = res["decoder_only"][d["path"]]
        lines.append(f"decoder {d['path']:6s} {r['mb_s']:8.1f} MB/s  ({r['s']:.2f} s, "
                     f"x{r['ratio']:.1f} baseline)")
    if tandem:
        secs = tandem["seconds"]
        best, med = min(secs), statistics.median(secs)
        peak = max(tandem["rss_mb"])
        ratio = mb / med / base_mbs
        res.update({
            "tandem_s": [round(s, 3) for s in secs], "tandem_mb_s_best": round(mb / best, 2),
            "tandem_mb_s_median": round(mb / med, 2), "ratio": round(ratio, 2),
            "ratio_best": round(mb / best / base_mbs, 2), "peak_rss_mb": round(peak, 1),
            "rss_floor_mb": round(floor_mb, 1),
            "tandem_records": sum(i.get("records", 0) for i in tandem["report"]["ingested"]),
            "tandem_parts": sum(i.get("parts", 0) for i in tandem["report"]["ingested"]),
        })
        res["checks"] = {f"ratio>={RATIO_TARGET:g}": ratio >= RATIO_TARGET,
                         f"rss<={RSS_TARGET_MB:g}MB": peak <= RSS_TARGET_MB}
        lines += [f"tandem ingest  {mb / med:8.1f} MB/s  median of {len(secs)} "
                  f"(best {mb / best:.1f} MB/s; {', '.join(f'{s:.2f}' for s in secs)} s)",
                  f"ratio          {ratio:8.1f} x baseline (median; best {res['ratio_best']:.1f})",
                  f"peak RSS       {peak:8.0f} MB  (child max; floor {floor_mb:.0f} MB)"]
        for name, ok in res["checks"].items():
            lines.append(f"  {name:14s} {'PASS' if ok else 'FAIL'}")
        if res["tandem_records"] != meta["records"]:
            lines.append(f"  note: tandem reported {res['tandem_records']:,} records, "
                         f"the file has {meta['records']:,}")
    else:
        lines.append("tandem ingest  not available (no working `tandem ingest`): SKIPPED")
    cells = [f"{k} {'-' if ph.get(k) is None else f'{ph[k]:.3f}'}" for k in PHASES]
    lines.append("phases (s)     " + " | ".join(cells))
    if start_s is not None:
        lines.append(f"start-up       {start_s:8.3f} s   (tandem ingest of a FAR-only log)")
    print("\n".join(lines), flush=True)
    return res


def _tandem_runs(runner: Runner, cmd: list[str] | None, path: Path,
                 runs: int) -> dict[str, Any] | None:
    if cmd is None or runs < 1:
        return None
    try:
        return run_tandem(runner, cmd, path, runs)
    except (RuntimeError, ValueError) as exc:
        print(f"tandem ingest failed on {path.name}: {exc}")
        return None


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--files", default="standard,dense,dense-be",
                    help="comma-separated: standard, dense, dense-be (default all)")
    ap.add_argument("--runs", type=int, default=4,
                    help="tandem ingest runs per file, half before the baseline and half "
                         "after (default 4)")
    ap.add_argument("--baseline-mb", type=float, default=None,
                    help="time the baseline on the first N MB only (default: whole file)")
    ap.add_argument("--regenerate", action="store_true", help="rebuild the cached files")
    ap.add_argument("--profile", action="store_true", help="cProfile the Decoder-only run")
    ap.add_argument("--generate-only", metavar="FILE", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.generate_only:
        _generate(args.generate_only)
        return 0
    keys = [k.strip() for k in args.files.split(",") if k.strip()]
    bad = [k for k in keys if k not in FILES]
    if bad:
        ap.error(f"unknown file {bad[0]!r}; choose from {', '.join(FILES)}")
    files = {k: ensure_file(k, args.regenerate) for k in keys}
    load0 = os.getloadavg()[0]
    cmd = _tandem_cmd()
    runner = Runner()
    start_s = start_up(runner, cmd) if cmd is not None else None
    try:
        from pipeline.read.stdf.decoder import PATHS, default_path
        paths: list[str | None] = [p for p in PATHS if p != "c" or default_path() == "c"]
    except ImportError:  # a decoder of before the paths had names: its one path
        paths = [None]
    results: dict[str, Any] = {}
    for k, (path, meta) in files.items():
        load = os.getloadavg()[0]
        # Half the whole-process runs before the baseline, half after: on a shared machine
        # the load drifts, and the median then brackets the baseline's time.
        tandem = _tandem_runs(runner, cmd, path, (args.runs + 1) // 2)
        data = path.read_bytes()
        meta = {**meta, "file": str(path.relative_to(OUT.parent.parent))}
        decoders = [run_decoder(data, p, args.profile) for p in paths]
        for d in decoders:
            if d["records"] != meta["records"]:
                print(f"note: Decoder ({d['path']}) counted {d['records']:,} records, the "
                      f"file has {meta['records']:,} (damage: {d['damage']})")
        ph = phases(path, data)
        base = run_baseline(data, args.baseline_mb)
        del data
        later = _tandem_runs(runner, cmd, path, args.runs // 2)
        if tandem and later:
            tandem["seconds"] += later["seconds"]
            tandem["rss_mb"] += later["rss_mb"]
        results[k] = report_file(k, meta, tandem, decoders, base, ph, runner.floor_mb(),
                                 start_s, (load + os.getloadavg()[0]) / 2)
    runner.close()
    out = {"load_avg_start": round(load0, 2), "load_avg_end": round(os.getloadavg()[0], 2),
           "python": sys.version.split()[0], "cpus": os.cpu_count(), "files": results}
    (OUT / "last.json").write_text(json.dumps(out, indent=2) + "\n")
    print(f"figures in {OUT / 'last.json'}; load average {load0:.2f} at start, "
          f"{out['load_avg_end']:.2f} at end")
    return 0


if __name__ == "__main__":
    # The checkout's pipeline when not installed; PYTHONPATH (another checkout, to time a
    # before/after pair) and the installed package come first.
    sys.path.append(str(Path(__file__).resolve().parent.parent))
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    sys.exit(main())
