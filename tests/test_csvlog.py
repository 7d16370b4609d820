"""The timing-CSV reader: layouts it accepts, errors it names, and an outside oracle.

The oracle is Python's stdlib: rows written with `csv.writer` and read back with
`csv.reader` plus int()/float() must give the same values and line numbers as
`read_timing_csv`, which reads with polars (or the stdlib only when polars cannot).
"""

from __future__ import annotations

import csv
import io
import random

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from pipeline.errors import InputError
from pipeline.read import csvlog
from pipeline.read.csvlog import TIMING_CSV_SCHEMA, read_timing_csv, sniff_timing_csv

REQUIRED = ["lot_id", "touchdown", "site", "part_id", "block", "start_ms", "end_ms"]
HEADER = ",".join(REQUIRED)
GOOD = HEADER + "\nLOT-Q7,0,0,U1,contact,0,1\n"
ROWS = [
    ["LOT-Q7", "0", "0", "U001", "contact", "0", "1.5"],
    ["LOT-Q7", "0", "1", "U002", "contact", "0.25", "1.75"],
    ["LOT-Q7", "1", "0", "U003", "scan_dsp0", "2", "12.125"],
]


def csv_text(header: list[str], rows: list[list[str]], sep: str = ",", end: str = "\n") -> str:
    return end.join(sep.join(r) for r in [header, *rows]) + end


def read(text: str | bytes, path: str = "timing.csv") -> csvlog.CsvLog:
    return read_timing_csv(text.encode() if isinstance(text, str) else text, path)


def column(log: csvlog.CsvLog, name: str) -> list[object]:
    return log.table.column(name).to_pylist()


def expected_required(rows: list[list[str]]) -> dict[str, list[object]]:
    """The seven required columns as plain Python reads them."""
    kinds = [str, int, int, str, str, float, float]
    return {n: [kind(r[i]) for r in rows]
            for i, (n, kind) in enumerate(zip(REQUIRED, kinds, strict=True))}


# ------------------------------------------------------------------ accepted layouts


@pytest.mark.parametrize("sep", [",", ";", "\t"])
def test_each_separator_reads_the_same_values(sep: str) -> None:
    log = read(csv_text(REQUIRED, ROWS, sep=sep))
    assert log.table.schema == TIMING_CSV_SCHEMA
    assert {n: column(log, n) for n in REQUIRED} == expected_required(ROWS)
    assert column(log, "line") == [2, 3, 4]
    assert log.ignored_columns == []


def test_columns_in_any_order_with_trimmed_case_insensitive_names() -> None:
    order = [6, 4, 0, 2, 5, 1, 3]
    header = [f"  {REQUIRED[i].upper()} " for i in order]
    rows = [[r[i] for i in order] for r in ROWS]
    log = read(csv_text(header, rows, sep=";"))
    assert {n: column(log, n) for n in REQUIRED} == expected_required(ROWS)


def test_absent_optional_columns_take_their_defaults() -> None:
    log = read(csv_text(REQUIRED, ROWS))
    assert column(log, "head") == [1, 1, 1]
    for name in ("hard_bin", "soft_bin", "passed", "test_time_ms"):
        assert column(log, name) == [None, None, None]


def test_optional_columns_present_and_empty_cells() -> None:
    header = REQUIRED + ["test_time_ms", "passed", "soft_bin", "hard_bin", "head"]
    rows = [ROWS[0] + ["812.5", "pass", "1", "1", "2"],
            ROWS[1] + ["", "", "", "", ""],
            ROWS[2] + ["90", "F", "17", "5", "0"]]
    log = read(csv_text(header, rows, sep="\t"))
    assert column(log, "test_time_ms") == [812.5, None, 90.0]
    assert column(log, "passed") == [True, None, False]
    assert column(log, "soft_bin") == [1, None, 17]
    assert column(log, "hard_bin") == [1, None, 5]
    assert column(log, "head") == [2, 1, 0]  # an empty head cell means head 1, as absent


@pytest.mark.parametrize("token,value", [
    ("true", True), ("FALSE", False), ("1", True), ("0", False), ("Yes", True),
    ("no", False), ("PASS", True), ("fail", False), ("y", True), ("N", False),
    ("p", True), ("f", False),
])
def test_passed_tokens(token: str, value: bool) -> None:
    log = read(csv_text(REQUIRED + ["passed"], [ROWS[0] + [token]]))
    assert column(log, "passed") == [value]


def test_unknown_columns_are_ignored_and_listed() -> None:
    header = ["Operator_Note", *REQUIRED[:3], "", *REQUIRED[3:], "temp_c"]
    rows = [["x", *r[:3], "", *r[3:], "25"] for r in ROWS]
    log = read(csv_text(header, rows))
    assert log.ignored_columns == ["Operator_Note", "(unnamed column 5)", "temp_c"]
    assert log.table.column_names == TIMING_CSV_SCHEMA.names
    assert {n: column(log, n) for n in REQUIRED} == expected_required(ROWS)


def test_bom_crlf_blank_lines_and_padding() -> None:
    padded = [[f" {c} " for c in r] for r in ROWS]
    text = csv_text(REQUIRED, padded, end="\r\n")
    lines = text.split("\r\n")
    text = "\r\n".join(lines[:2] + [""] + lines[2:]) + "\r\n\r\n"  # a blank line inside
    log = read(b"\xef\xbb\xbf" + text.encode())
    assert {n: column(log, n) for n in REQUIRED} == expected_required(ROWS)
    assert column(log, "line") == [2, 4, 5]


def test_quoted_fields_keep_separators_quotes_and_line_breaks() -> None:
    text = (HEADER + "\n"
            + 'LOT-Q7,0,0,"U,1","scan\nwith ""notes""",0,1\n'
            + '"LOT-Q7",0,1,U2,contact,"2.5",3\n')
    log = read(text)
    assert column(log, "part_id") == ["U,1", "U2"]
    assert column(log, "block") == ['scan\nwith "notes"', "contact"]
    assert column(log, "line") == [2, 4]  # the second record starts after the broken line


def test_stray_quote_falls_back_to_stdlib_reader() -> None:
    # polars refuses a quote in the middle of an unquoted field; the stdlib keeps it
    log = read(HEADER + '\nLOT-Q7,0,0,U1,blk"a,0,1\nLOT-Q7,0,0,U1,blk_b,1,2\n')
    assert column(log, "block") == ['blk"a', "blk_b"]
    assert column(log, "line") == [2, 3]


def test_whitespace_only_line_counts_as_blank() -> None:
    log = read(GOOD + "   \n" + "LOT-Q7,0,1,U2,contact,0,1\n")
    assert column(log, "site") == [0, 1]
    assert column(log, "line") == [2, 4]


@pytest.mark.parametrize("blank", ["\r", "\x0b", "\x0c"])
def test_stray_control_whitespace_around_cells_is_trimmed(blank: str) -> None:
    log = read(GOOD + f"LOT-Q7,0,1,U2,{blank}contact{blank},0,{blank}1{blank}\n")
    assert column(log, "block") == ["contact", "contact"]
    assert column(log, "end_ms") == [1.0, 1.0]


def test_empty_part_id_is_null() -> None:
    log = read(HEADER + "\nLOT-Q7,0,0,,contact,0,1\n")
    assert column(log, "part_id") == [None]


# ------------------------------------------------------------------ errors

ERRORS = [
    ("", "timing.csv: empty file"),
    ("\n \r\n", "timing.csv: empty file"),
    (HEADER + "\n", "timing.csv: no data rows (only the header)"),
    (HEADER + "\r\n\r\n\n", "timing.csv: no data rows (only the header)"),
    ("lot_id,touchdown,site,part_id,block,start_ms\nL,0,0,U,b,0\n",
     "timing.csv: missing column end_ms (header has: lot_id, touchdown, site, part_id, "
     "block, start_ms)"),
    ("lot;site;block\n", "timing.csv: missing columns lot_id, touchdown, part_id, start_ms, "
     "end_ms (header has: lot, site, block)"),
    (HEADER + ",site\n", "timing.csv: line 1: column site appears twice"),
    ("\n" + GOOD, "timing.csv: line 1 is blank; the header must be the first line"),
    (GOOD.replace("\n", "\r"), "timing.csv: lines end in CR only; save the file with LF or "
     "CRLF line ends"),
    (GOOD + "L,0,0,U,b,abc,1\n", "timing.csv: line 3, column start_ms: expected a number, "
     "found 'abc'"),
    (GOOD + "L,0,1.5,U,b,0,1\n", "timing.csv: line 3, column site: expected an integer, "
     "found '1.5'"),
    (GOOD + "L,,0,U,b,0,1\n", "timing.csv: line 3, column touchdown: expected an integer, "
     "found nothing"),
    (GOOD + "L,0,0,U,b,5.0,3.0\n", "timing.csv: line 3: end_ms 3.0 is before start_ms 5.0"),
    (GOOD + "L,0,-1,U,b,0,1\n", "timing.csv: line 3, column site: expected 0 or more, "
     "found '-1'"),
    (GOOD + "L,-2,0,U,b,0,1\n", "timing.csv: line 3, column touchdown: expected 0 or more, "
     "found '-2'"),
    (GOOD + "L,0,0,U,b,-0.5,1\n", "timing.csv: line 3, column start_ms: expected 0 or more, "
     "found '-0.5'"),
    (GOOD + "L,0,0,U,b,0,inf\n", "timing.csv: line 3, column end_ms: expected a finite "
     "number, found 'inf'"),
    (GOOD + "L,0,0,U,,0,1\n", "timing.csv: line 3, column block: expected a name, "
     "found nothing"),
    (GOOD + " ,0,0,U,b,0,1\n", "timing.csv: line 3, column lot_id: expected a name, "
     "found nothing"),
    (GOOD + ",,,,,,\n", "timing.csv: line 3, column lot_id: expected a name, found nothing"),
    # an all-empty row plus short rows whose missing separators add up to its own
    (GOOD + ",,,,,,\nL,0,0,U\nL,0,0,U\n", "timing.csv: line 4: expected 7 fields (as in "
     "the header), found 4"),
    (GOOD + "L,0,0,U,b,0\n", "timing.csv: line 3: expected 7 fields (as in the header), "
     "found 6"),
    (GOOD + "L,0,0,U,b,0,1,9\n", "timing.csv: line 3: expected 7 fields (as in the header), "
     "found 8"),
    (GOOD + 'L,0,0,"U\nV",b,0,1\nL,0,0,U,b,0\n', "timing.csv: line 5: expected 7 fields "
     "(as in the header), found 6"),
    (GOOD + 'L,0,0,"U\nV",b,0\nL,0,0,U,b,0,1\n', "timing.csv: line 3: expected 7 fields "
     "(as in the header), found 6"),
    (GOOD + 'L,0,0,U,"b,0,1\nL,0,0,U,b,0,1\n', "timing.csv: line 3: a quoted field is "
     "never closed"),
    (HEADER + ",head\n" + "L,0,0,U,b,0,1,-1\n", "timing.csv: line 2, column head: expected "
     "0 or more, found '-1'"),
    (HEADER + ",passed\n" + "L,0,0,U,b,0,1,maybe\n", "timing.csv: line 2, column passed: "
     "expected pass/fail, true/false, yes/no, y/n, p/f or 1/0, found 'maybe'"),
    (HEADER + ",hard_bin\n" + "L,0,0,U,b,0,1,x\n", "timing.csv: line 2, column hard_bin: "
     "expected an integer, found 'x'"),
    (HEADER + ",test_time_ms\n" + "L,0,0,U,b,0,1,nan\n", "timing.csv: line 2, column "
     "test_time_ms: expected a finite number, found 'nan'"),
]


@pytest.mark.parametrize("text,message", ERRORS)
def test_errors_name_file_line_and_column(text: str, message: str) -> None:
    with pytest.raises(InputError) as caught:
        read(text)
    assert str(caught.value) == message


def test_error_path_is_shown_as_given() -> None:
    with pytest.raises(InputError, match=r"^logs/day 2/t\.csv: line 3, column site: "):
        read(GOOD + "L,0,x,U,b,0,1\n", path="logs/day 2/t.csv")


def test_not_utf8_names_the_line() -> None:
    data = (GOOD + "L,0,0,U").encode() + b"\xe9" + b",b,0,1\n"
    with pytest.raises(InputError, match=r"^timing\.csv: line 3: not UTF-8 text \(byte 0xe9\)"):
        read(data)
    with pytest.raises(InputError, match="UTF-16"):
        read(b"\xff\xfe" + GOOD.encode("utf-16-le"))


def test_earliest_bad_line_is_reported_whatever_the_column() -> None:
    text = GOOD + "L,0,0,U,b,0,oops\n" + "L,x,0,U,b,0,1\n"
    with pytest.raises(InputError, match="line 3, column end_ms"):
        read(text)


def test_every_message_is_one_line() -> None:
    with pytest.raises(InputError) as caught:
        read(GOOD + 'L,0,0,U,b,"1\n2",3\n')
    assert str(caught.value) == ("timing.csv: line 3, column start_ms: expected a number, "
                                 "found '1\\n2'")


# ------------------------------------------------------------------ sniffing


@pytest.mark.parametrize("head", [
    HEADER.encode(),
    (HEADER + "\nLOT,0,0,U,b,0,1\n").encode(),
    b"\xef\xbb\xbf" + HEADER.replace(",", ";").encode() + b"\r\n",
    "\t".join(reversed(REQUIRED)).upper().encode() + b"\n",
    (" extra , " + HEADER.replace(",", " , ") + ",passed\n").encode(),
    (HEADER + "\n" + "LOT,0,0,U,b,0,1\n" * 10_000).encode()[:65536],
])
def test_sniff_accepts_timing_headers(head: bytes) -> None:
    assert sniff_timing_csv(head) is True


@pytest.mark.parametrize("head", [
    b"",
    b"\x02\x00\x00\x0a\x02\x04",
    random.Random(7).randbytes(4096),
    ",".join(REQUIRED[:6]).encode() + b"\n",
    ",".join(REQUIRED[1:]).encode() + b"\nLOT,0,0,U,b,0,1\n",
    b"\n" + HEADER.encode(),  # the header must be the first line
    b"lot_id|touchdown|site|part_id|block|start_ms|end_ms\n",
    b"x" * 70_000,
])
def test_sniff_rejects_other_content(head: bytes) -> None:
    assert sniff_timing_csv(head) is False


@settings(max_examples=100, deadline=None)
@given(st.binary(max_size=300), st.sampled_from([b"", b"\xef\xbb\xbf", HEADER.encode()[:20]]))
def test_sniff_never_raises(tail: bytes, prefix: bytes) -> None:
    assert isinstance(sniff_timing_csv(prefix + tail), bool)


# ------------------------------------------------------------------ outside oracle


def stdlib_expectation(text: str, sep: str) -> tuple[dict[str, list[object]], list[int]]:
    """Values and first lines of each record, as csv.reader and int()/float() see them."""
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=sep)
    names = [n.strip().lower() for n in next(reader)]
    out: dict[str, list[object]] = {n: [] for n in REQUIRED}
    lines: list[int] = []
    done = reader.line_num
    for row in reader:
        lines.append(done + 1)
        done = reader.line_num
        cells = dict(zip(names, (c.strip() for c in row), strict=True))
        for n, kind in zip(REQUIRED, [str, int, int, str, str, float, float], strict=True):
            out[n].append(kind(cells[n]) if cells[n] or kind is str else None)
    out["part_id"] = [v or None for v in out["part_id"]]
    return out, lines


def random_rows(rng: random.Random, n: int, awkward: bool) -> list[list[str]]:
    pieces = ["scan", "mbist", "rf cal", "a,b", 'q"t', "x;y", "t\tb", "two\nlines"]
    rows = []
    for i in range(n):
        start = rng.uniform(0, 5000)
        name = rng.choice(pieces) if awkward else rng.choice(pieces[:3])
        rows.append([f"LOT{rng.randrange(3)}", str(i // 4), str(i % 4), f"U{i}" if i % 5 else "",
                     f"{name}_{i % 7}", repr(start), repr(start + rng.expovariate(0.1))])
    return rows


@pytest.mark.parametrize("seed,sep,awkward,end", [
    (1, ",", False, "\n"), (2, ";", True, "\n"), (3, "\t", True, "\r\n"), (4, ",", True, "\r\n"),
])
def test_matches_stdlib_csv_on_written_files(seed: int, sep: str, awkward: bool,
                                             end: str) -> None:
    rng = random.Random(seed)
    order = rng.sample(REQUIRED, len(REQUIRED))
    rows = random_rows(rng, 1000, awkward)
    buf = io.StringIO(newline="")
    writer = csv.writer(buf, delimiter=sep, lineterminator=end)
    writer.writerow(order)
    writer.writerows([r[REQUIRED.index(n)] for n in order] for r in rows)
    text = buf.getvalue()
    log = read(text)
    values, lines = stdlib_expectation(text, sep)
    assert {n: column(log, n) for n in REQUIRED} == values
    assert column(log, "line") == lines


def test_fast_and_stdlib_paths_agree(monkeypatch: pytest.MonkeyPatch) -> None:
    rows = random_rows(random.Random(11), 500, awkward=True)
    buf = io.StringIO(newline="")
    csv.writer(buf, lineterminator="\n").writerows([REQUIRED + ["passed"],
                                                    *(r + ["pass"] for r in rows)])
    data = buf.getvalue().encode()
    fast = read(data).table
    monkeypatch.setattr(csvlog, "_fast_cells", lambda body, header: None)
    assert read(data).table.equals(fast)


@settings(max_examples=30, deadline=None)
@given(st.lists(st.tuples(
    st.text(alphabet='abcXYZ09_-,;"\t\n ', min_size=1, max_size=8).filter(str.strip),
    st.integers(0, 9), st.floats(0, 1e6, allow_nan=False), st.floats(0, 1e3)),
    min_size=1, max_size=20), st.sampled_from([",", ";", "\t"]))
def test_round_trip_of_arbitrary_names(rows: list[tuple[str, int, float, float]],
                                       sep: str) -> None:
    buf = io.StringIO(newline="")
    writer = csv.writer(buf, delimiter=sep, lineterminator="\n")
    writer.writerow(REQUIRED)
    writer.writerows([name, 0, site, name, name, repr(start), repr(start + dur)]
                     for name, site, start, dur in rows)
    log = read(buf.getvalue())
    assert column(log, "block") == [name.strip() for name, *_ in rows]
    assert column(log, "site") == [site for _, site, _, _ in rows]
    assert column(log, "end_ms") == [start + dur for _, _, start, dur in rows]
