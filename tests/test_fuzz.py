"""Fuzzing: mutated, truncated and spliced logs decode or fail in the documented ways only.

Two properties, each run with a short budget in the default suite and a long one under
``@pytest.mark.fuzz`` (``make fuzz``):

- **Ingest** (``decode.decode_to_staging``, what ``tandem ingest`` runs per file): every
  input ends ``ok``, ``partial`` or ``rejected`` with a one-line reason, within a time
  bound, with no exception escaping and no reconciliation failure (records read by type
  equal rows staged).
- **Salvage** (the sans-IO decoder): a stream changed at byte N keeps every part whose
  PRR ends at or before N, row for row as the unchanged stream decodes it; it raises
  nothing but FormatError, and that only when the FAR itself (bytes 0-5) is damaged.
- **Paths** (the decoder's engines): every mutated stream decodes to the same tables,
  rows and counts on the compiled path, on the numpy path and in the reference stream
  decoder (``reference.py``, record by record), or raises FormatError on all of them.

Seeds are invented (tests/test_reliability.tiny_log) or cut from the invented sample logs;
mutations are bit flips, byte inserts and deletes, truncation, REC_LEN corruption (the
U*2 at a record's start, STDF V4 record header), duplicated ranges and splices of two
logs, applied to the log or to its compressed file.
"""

from __future__ import annotations

import bz2
import gzip
import lzma
import shutil
import signal
import struct
import time
from collections import Counter
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pyarrow as pa
import pytest
import zstandard
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from pipeline.errors import FormatError
from pipeline.jobs.decode import InputLimits, decode_to_staging
from pipeline.read.stdf.decoder import Decoder, Limits
from pipeline.read.stdf.reference import decode_stream
from pipeline.store import Store
from tests.conftest import SAMPLES, TIMING_CSV, walk
from tests.paths import PATHS, assert_same, collect
from tests.test_reliability import tiny_log

SHORT_INGEST, SHORT_SALVAGE, LONG = 100, 100, 5000  # examples: default run, make fuzz
TIME_BOUND_S = 10.0  # per input; a clean one takes well under a second


# -- seeds --------------------------------------------------------------------------------
def _prefix(data: bytes, upto: int) -> bytes:
    """The complete records of ``data`` that end by byte ``upto``."""
    end = 0
    for pos, _, payload in walk(data):
        if pos + 4 + len(payload) > upto:
            break
        end = pos + 4 + len(payload)
    return data[:end]


def _tail(data: bytes, records: int) -> bytes:
    """The FAR and the last ``records`` records (summaries: TSR, HBR, SBR, PCR, MRR)."""
    starts = [pos for pos, _, _ in walk(data)]
    return data[:6] + data[starts[-records]:]


_MARKERS = (SAMPLES / "pf4_L0231_w01_markers.stdf").read_bytes()
STDF_SEEDS: dict[str, bytes] = {
    "tiny_le": tiny_log("FZ-LE", touchdowns=3, seed=1).data,
    "tiny_be": tiny_log("FZ-BE", touchdowns=3, seed=2, endian=">").data,
    "sample_head": _prefix(_MARKERS, 30_000),  # PMR, PGR, PTR, MPR, FTR, DTR, sections
    "sample_tail": _tail((SAMPLES / "pf4_L0233_tsr_only.stdf").read_bytes(), 150),
}
_CSV = b"".join((SAMPLES / TIMING_CSV).read_bytes().splitlines(keepends=True)[:40])
COMPRESS = {"gzip": lambda d: gzip.compress(d, mtime=0), "bzip2": bz2.compress,
            "xz": lzma.compress, "zstd": lambda d: zstandard.ZstdCompressor().compress(d)}
INGEST_SEEDS = [*STDF_SEEDS, "csv"]


def seed_bytes(name: str) -> bytes:
    return _CSV if name == "csv" else STDF_SEEDS[name]


# -- mutations ----------------------------------------------------------------------------
KINDS = ("flip", "insert", "delete", "truncate", "rec_len", "duplicate", "splice")
mutation = st.tuples(st.sampled_from(KINDS), st.integers(0, 1 << 20), st.integers(0, 1 << 16),
                     st.sampled_from(sorted(STDF_SEEDS)))


def mutate(data: bytes, kind: str, a: int, b: int, other: str) -> bytes:
    d = bytearray(data)
    n = len(d)
    # Hypothesis favours small integers; spread them over the whole log (Fibonacci hash).
    pos = (a * 0x9E3779B1) % (n + 1)
    if kind == "flip" and n:
        d[pos % n] ^= 1 << (b % 8)
    elif kind == "insert":
        d[pos:pos] = bytes((b >> s) & 0xFF for s in range(0, 8 * (1 + b % 6), 8))
    elif kind == "delete":
        del d[pos:pos + 1 + b % 64]
    elif kind == "truncate":
        del d[pos:]
    elif kind == "rec_len":  # a record's REC_LEN (little or big endian alike: 2 bytes)
        starts = [p for p, _, _ in walk(bytes(d), "<" if d[:2] == b"\x02\x00" else ">")]
        if starts:
            p = starts[a % len(starts)]
            d[p:p + 2] = struct.pack("<H", b & 0xFFFF)
    elif kind == "duplicate":
        d[pos:pos] = d[pos:pos + 1 + b % 4096]
    elif kind == "splice":
        o = STDF_SEEDS[other]
        d = d[:pos] + o[b % (len(o) + 1):]
    return bytes(d)


@st.composite
def ingest_case(draw: Any) -> tuple[str, str, str, list[tuple[str, int, int, str]]]:
    seed = draw(st.sampled_from(INGEST_SEEDS))
    codec = draw(st.sampled_from(["none", "none", *COMPRESS]))
    layer = draw(st.sampled_from(["log", "file"])) if codec != "none" else "log"
    muts = draw(st.lists(mutation, min_size=1, max_size=4))
    return seed, codec, layer, muts


def build(seed: str, codec: str, layer: str, muts: list[tuple[str, int, int, str]]) -> bytes:
    data = seed_bytes(seed)
    if layer == "log":
        for m in muts:
            data = mutate(data, *m)
    if codec != "none":
        data = COMPRESS[codec](data)
    if layer == "file":
        for m in muts:
            data = mutate(data, *m)
    return data


# -- harness ------------------------------------------------------------------------------
OUTCOMES: Counter[str] = Counter()


class Hang(Exception):
    pass


@contextmanager
def time_bound(seconds: float) -> Iterator[None]:
    """Interrupt a hang in Python code (SIGALRM reaches the main thread)."""
    def on_alarm(signum: int, frame: Any) -> None:
        raise Hang(f"no outcome within {seconds} s")

    old = signal.signal(signal.SIGALRM, on_alarm)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)


@pytest.fixture(scope="module")
def fuzz_store(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    d = tmp_path_factory.mktemp("fuzz")
    with Store(d / "store").writer():  # an empty store: the derivation reads its schema files
        pass
    yield d
    print(f"\nfuzz outcomes: {dict(sorted(OUTCOMES.items()))}")


def check_ingest(folder: Path, data: bytes, label: str) -> None:
    path = folder / "input.bin"
    path.write_bytes(data)
    t0 = time.perf_counter()
    with time_bound(TIME_BOUND_S):
        decoded = decode_to_staging(str(folder / "store"), str(path), None,
                                    InputLimits(0, 8 << 20, 8 << 20))
        entry, root = decoded.entry, decoded.root
    took = time.perf_counter() - t0
    if root:
        shutil.rmtree(root)
    status, error = entry["status"], entry.get("error")
    OUTCOMES[f"ingest:{status}"] += 1
    assert took < TIME_BOUND_S
    assert status in ("ok", "partial", "rejected"), (label, entry)
    if status != "ok" or error is not None:
        assert isinstance(error, str) and error and "\n" not in error, (label, entry)
        assert "Traceback" not in error
    if status == "rejected":
        assert (entry["records"], entry["parts"]) == (0, 0)
    else:
        assert entry["format"] in ("stdf", "csv") and entry["parts"] >= 0


_FUZZ = settings(deadline=None, database=None, print_blob=True,
                 suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                        HealthCheck.function_scoped_fixture])


@settings(_FUZZ, max_examples=SHORT_INGEST, derandomize=True)
@given(case=ingest_case())
def test_fuzz_ingest_outcomes(fuzz_store: Path, case: Any) -> None:
    check_ingest(fuzz_store, build(*case), repr(case))


@pytest.mark.fuzz
@settings(_FUZZ, max_examples=LONG)
@given(case=ingest_case())
def test_fuzz_ingest_outcomes_long(fuzz_store: Path, case: Any) -> None:
    check_ingest(fuzz_store, build(*case), repr(case))


# -- salvage: the decoder keeps the unchanged prefix ----------------------------------------
PART_COLUMNS = ("part_index", "part_id", "hard_bin", "soft_bin", "x_coord", "y_coord",
                "test_t", "touchdown", "rec_index", "head_num", "site_num")
RESULT_COLUMNS = {"ptr": ("part_index", "rec_index", "test_num", "result", "test_flg"),
                  "mpr": ("part_index", "rec_index", "test_num", "rtn_rslt", "rtn_stat"),
                  "ftr": ("part_index", "rec_index", "test_num", "test_flg", "fail_pin")}


def decode(data: bytes, batch: int) -> dict[str, pa.Table]:
    dec = Decoder(Limits(batch_bytes=batch))
    out: dict[str, list[pa.Table]] = {}
    for i in range(0, len(data), 4096):
        for name, t in dec.feed(data[i:i + 4096]):
            out.setdefault(name, []).append(t)
    for name, t in dec.close():
        out.setdefault(name, []).append(t)
    return {k: pa.concat_tables(v, promote_options="default") for k, v in out.items()}


def _rows(tables: dict[str, pa.Table], name: str, cols: tuple[str, ...],
          parts: int) -> list[tuple[Any, ...]]:
    t = tables.get(name)
    if t is None:
        return []
    rows = zip(*(t.column(c).to_pylist() for c in cols), strict=True)
    return sorted((r for r in rows if r[0] is not None and r[0] < parts), key=repr)


_ORIGINAL: dict[tuple[str, int], tuple[dict[str, pa.Table], list[int]]] = {}


def original(seed: str, batch: int) -> tuple[dict[str, pa.Table], list[int]]:
    """The unchanged seed decoded, and where each of its PRRs (STDF V4 5/20) ends."""
    if (seed, batch) not in _ORIGINAL:
        data = STDF_SEEDS[seed]
        endian = "<" if data[:2] == b"\x02\x00" else ">"
        ends = [p + 4 + len(body) for p, key, body in walk(data, endian) if key == (5, 20)]
        _ORIGINAL[(seed, batch)] = (decode(data, batch), ends)
    return _ORIGINAL[(seed, batch)]


def check_salvage(seed: str, muts: list[tuple[str, int, int, str]], batch: int) -> None:
    data = STDF_SEEDS[seed]
    bad = data
    for m in muts:
        bad = mutate(bad, *m)
    same = next((i for i, (x, y) in enumerate(zip(data, bad, strict=False)) if x != y),
                min(len(data), len(bad)))
    with time_bound(TIME_BOUND_S):
        try:
            got = decode(bad, batch)
        except FormatError:
            OUTCOMES["salvage:format_error"] += 1
            assert same < 6 or len(bad) < 6, f"FormatError with the FAR intact ({same})"
            return
    ref, ends = original(seed, batch)
    kept = sum(1 for e in ends if e <= same)
    OUTCOMES["salvage:decoded"] += 1
    OUTCOMES["salvage:parts_checked"] += kept
    assert _rows(got, "parts", PART_COLUMNS, kept) == _rows(ref, "parts", PART_COLUMNS, kept)
    for rec, cols in RESULT_COLUMNS.items():
        assert _rows(got, rec, cols, kept) == _rows(ref, rec, cols, kept), rec


salvage_case = st.tuples(st.sampled_from(sorted(STDF_SEEDS)),
                         st.lists(mutation, min_size=1, max_size=3),
                         st.sampled_from([64, 4096, 8 << 20]))


@settings(_FUZZ, max_examples=SHORT_SALVAGE, derandomize=True)
@given(case=salvage_case)
def test_fuzz_salvage_keeps_the_unchanged_prefix(case: Any) -> None:
    check_salvage(*case)


@pytest.mark.fuzz
@settings(_FUZZ, max_examples=LONG)
@given(case=salvage_case)
def test_fuzz_salvage_keeps_the_unchanged_prefix_long(case: Any) -> None:
    check_salvage(*case)


# -- paths: compiled, numpy and reference agree row for row -------------------------------
def check_paths(seed: str, muts: list[tuple[str, int, int, str]], batch: int) -> None:
    bad = STDF_SEEDS[seed]
    for m in muts:
        bad = mutate(bad, *m)
    with time_bound(TIME_BOUND_S):
        try:
            ref = decode_stream(bad)
        except FormatError:
            ref = None
        for path in PATHS:
            dec = Decoder(Limits(batch_bytes=batch), path=path)
            got: list[tuple[str, pa.Table]] = []
            try:
                for i in range(0, len(bad), 4096):
                    got += dec.feed(bad[i:i + 4096])
                got += dec.close()
            except FormatError:
                assert ref is None, path
                continue
            assert ref is not None, path
            assert_same(dec, collect(got), ref)
    OUTCOMES["paths:" + ("format_error" if ref is None else "decoded")] += 1


@settings(_FUZZ, max_examples=SHORT_SALVAGE, derandomize=True)
@given(case=salvage_case)
def test_fuzz_paths_decode_alike(case: Any) -> None:
    check_paths(*case)


@pytest.mark.fuzz
@settings(_FUZZ, max_examples=LONG)
@given(case=salvage_case)
def test_fuzz_paths_decode_alike_long(case: Any) -> None:
    check_paths(*case)
