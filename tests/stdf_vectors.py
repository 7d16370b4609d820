"""Hand-assembled STDF V4 byte vectors: one table drives the encoder and decoder tests.

Every vector is written out field by field from the record layouts of the *Standard Test
Data Format (STDF) Specification, Version 4* (the record is cited above each case). None
of these bytes came out of our encoder: they are what the standard says the record must
look like, and the tests hold the codec to them.

How a case is spelled: each row is one field (or one part of one, such as a D*n bit
count) as its **little-endian** bytes, tagged with the width of the items that byte
order affects. ``b(...)`` rows (U*1, I*1, B*1, C*1, the count byte and text of C*n/B*n,
the data bytes of D*n, packed N*1) are the same in both orders; ``w2``/``w4``/``w8``
rows are runs of 2-, 4- or 8-byte items (U*2, I*4, R*4, kxU2, ...), each item reversed
for the big-endian twin. That swap is the only thing done mechanically; a few vectors
(``*-be-literal``) are also written out in big-endian by hand, with no swap at all, so the
swap itself is checked against hand-written bytes.

Float bit patterns (IEEE 754 binary32/binary64: sign, biased exponent, fraction) were
worked out by hand, from memory of that layout, for values that are exact in float32 so
that equality after a round trip is exact:

    0.0 = 00000000   0.0625 = 3D800000   0.125 = 3E000000   0.25 = 3E800000
    0.5 = 3F000000   0.75 = 3F400000     1.5 = 3FC00000     2.0 = 40000000
    2.5 = 40200000   3.0 = 40400000      5.0 = 40A00000     200.0 = 43480000
    -0.25 = BE800000 -1.0 = BF800000     (R*8) 1.5 = 3FF8000000000000, -0.25 = BFD0000000000000

Value conventions of our codec: C*n and C*1 are ``str`` (Latin-1), B*n and D*n are
``bytes`` (D*n with a bit count of 8 * len), N*1 is an int 0..15, arrays are lists, V*n is
a list of ``(type_code_name, value)`` tuples, ``("B0", None)`` for a pad byte. Names in
the text fields are invented.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

__all__ = ["FAR_BE", "FAR_LE", "UNKNOWN", "VECTORS", "Unknown", "Vector", "by_id", "stream"]


@dataclass(frozen=True)
class Vector:
    id: str
    record: str  # catalogue name, e.g. "PTR"
    endian: str  # "<" little-endian (CPU_TYPE 2), ">" big-endian (CPU_TYPE 1)
    values: dict[str, Any]  # fields present; a truncated record lists only the kept ones
    expected: bytes  # the whole record: 4-byte header + REC_LEN bytes of data


@dataclass(frozen=True)
class Unknown:
    """A record the catalogue does not know: only its header matters to us."""

    id: str
    typ: int
    sub: int
    endian: str
    expected: bytes


@dataclass(frozen=True)
class _Row:
    width: int  # 1: same bytes in both orders; 2/4/8: run of little-endian items
    le: bytes


def b(raw: bytes) -> _Row:
    return _Row(1, raw)


def w2(raw: bytes) -> _Row:
    return _Row(2, raw)


def w4(raw: bytes) -> _Row:
    return _Row(4, raw)


def w8(raw: bytes) -> _Row:
    return _Row(8, raw)


def _assemble(rows: list[_Row], endian: str) -> bytes:
    out = bytearray()
    for row in rows:
        if len(row.le) % row.width:
            raise ValueError(f"row of {len(row.le)} bytes is not a run of {row.width}-byte items")
        if endian == "<" or row.width == 1:
            out += row.le
        else:
            for i in range(0, len(row.le), row.width):
                out += row.le[i:i + row.width][::-1]
    return bytes(out)


VECTORS: list[Vector] = []
UNKNOWN: list[Unknown] = []


def _pair(id: str, record: str, values: dict[str, Any], rows: list[_Row]) -> None:
    for endian, suffix in (("<", "le"), (">", "be")):
        VECTORS.append(Vector(f"{id}-{suffix}", record, endian, values,
                              _assemble(rows, endian)))


def by_id(id: str) -> Vector:
    for v in VECTORS:
        if v.id == id:
            return v
    raise KeyError(id)


# --- STDF V4, FAR 0/10 (written per byte order: CPU_TYPE itself names the order) -------
FAR_LE = (
    b"\x02\x00"  # REC_LEN U*2 = 2 (little-endian)
    b"\x00"      # REC_TYP U*1 = 0
    b"\x0a"      # REC_SUB U*1 = 10
    b"\x02"      # CPU_TYPE U*1 = 2 (little-endian data)
    b"\x04"      # STDF_VER U*1 = 4
)
FAR_BE = (
    b"\x00\x02"  # REC_LEN U*2 = 2 (big-endian)
    b"\x00"      # REC_TYP U*1 = 0
    b"\x0a"      # REC_SUB U*1 = 10
    b"\x01"      # CPU_TYPE U*1 = 1 (big-endian data)
    b"\x04"      # STDF_VER U*1 = 4
)
VECTORS.append(Vector("FAR-le", "FAR", "<", {"CPU_TYPE": 2, "STDF_VER": 4}, FAR_LE))
VECTORS.append(Vector("FAR-be", "FAR", ">", {"CPU_TYPE": 1, "STDF_VER": 4}, FAR_BE))


def stream(endian: str, *records: bytes) -> bytes:
    """A whole STDF stream: the hand-written FAR for ``endian``, then ``records``."""
    if endian not in ("<", ">"):
        raise ValueError(f"endian must be '<' or '>', not {endian!r}")
    return (FAR_LE if endian == "<" else FAR_BE) + b"".join(records)


# --- STDF V4, ATR 0/20 ------------------------------------------------------------------
_pair("ATR", "ATR", {"MOD_TIM": 1700000000, "CMD_LINE": "merge -q lot7"}, [
    w2(b"\x12\x00"),          # REC_LEN = 18
    b(b"\x00"),               # REC_TYP = 0
    b(b"\x14"),               # REC_SUB = 20
    w4(b"\x00\xf1\x53\x65"),  # MOD_TIM U*4 = 1700000000 (0x6553F100)
    b(b"\x0dmerge -q lot7"),  # CMD_LINE C*n, count 13
])

# --- STDF V4, MIR 1/10 (truncated after JOB_REV: SBLOT_ID ... SUPR_NAM omitted) ---------
_pair("MIR-trunc", "MIR", {
    "SETUP_T": 1700000000, "START_T": 1700000060, "STAT_NUM": 3, "MODE_COD": "P",
    "RTST_COD": " ", "PROT_COD": " ", "BURN_TIM": 30, "CMOD_COD": " ", "LOT_ID": "L0T42",
    "PART_TYP": "DEV9", "NODE_NAM": "node3", "TSTR_TYP": "tstr", "JOB_NAM": "prog_a",
    "JOB_REV": "r2",
}, [
    w2(b"\x2f\x00"),          # REC_LEN = 47
    b(b"\x01"),               # REC_TYP = 1
    b(b"\x0a"),               # REC_SUB = 10
    w4(b"\x00\xf1\x53\x65"),  # SETUP_T U*4 = 1700000000
    w4(b"\x3c\xf1\x53\x65"),  # START_T U*4 = 1700000060 (0x6553F13C)
    b(b"\x03"),               # STAT_NUM U*1 = 3
    b(b"P"),                  # MODE_COD C*1 = "P" (production)
    b(b" "),                  # RTST_COD C*1 = " "
    b(b" "),                  # PROT_COD C*1 = " "
    w2(b"\x1e\x00"),          # BURN_TIM U*2 = 30
    b(b" "),                  # CMOD_COD C*1 = " "
    b(b"\x05L0T42"),          # LOT_ID C*n, count 5
    b(b"\x04DEV9"),           # PART_TYP C*n, count 4
    b(b"\x05node3"),          # NODE_NAM C*n, count 5
    b(b"\x04tstr"),           # TSTR_TYP C*n, count 4
    b(b"\x06prog_a"),         # JOB_NAM C*n, count 6
    b(b"\x02r2"),             # JOB_REV C*n, count 2
])

# --- STDF V4, MRR 1/20 ------------------------------------------------------------------
_pair("MRR", "MRR", {"FINISH_T": 1700003600, "DISP_COD": " ", "USR_DESC": "ok",
                     "EXC_DESC": ""}, [
    w2(b"\x09\x00"),          # REC_LEN = 9
    b(b"\x01"),               # REC_TYP = 1
    b(b"\x14"),               # REC_SUB = 20
    w4(b"\x10\xff\x53\x65"),  # FINISH_T U*4 = 1700003600 (0x6553FF10)
    b(b" "),                  # DISP_COD C*1 = " "
    b(b"\x02ok"),             # USR_DESC C*n, count 2
    b(b"\x00"),               # EXC_DESC C*n, count 0 (empty)
])

# --- STDF V4, PCR 1/30 (HEAD_NUM 255: summary over all sites) ---------------------------
_pair("PCR", "PCR", {"HEAD_NUM": 255, "SITE_NUM": 0, "PART_CNT": 1000, "RTST_CNT": 12,
                     "ABRT_CNT": 0, "GOOD_CNT": 950, "FUNC_CNT": 4294967295}, [
    w2(b"\x16\x00"),          # REC_LEN = 22
    b(b"\x01"),               # REC_TYP = 1
    b(b"\x1e"),               # REC_SUB = 30
    b(b"\xff"),               # HEAD_NUM U*1 = 255
    b(b"\x00"),               # SITE_NUM U*1 = 0
    w4(b"\xe8\x03\x00\x00"),  # PART_CNT U*4 = 1000
    w4(b"\x0c\x00\x00\x00"),  # RTST_CNT U*4 = 12
    w4(b"\x00\x00\x00\x00"),  # ABRT_CNT U*4 = 0
    w4(b"\xb6\x03\x00\x00"),  # GOOD_CNT U*4 = 950
    w4(b"\xff\xff\xff\xff"),  # FUNC_CNT U*4 = 4294967295 (the standard's "missing", from memory)
])

# --- STDF V4, HBR 1/40 ------------------------------------------------------------------
_pair("HBR", "HBR", {"HEAD_NUM": 1, "SITE_NUM": 2, "HBIN_NUM": 1, "HBIN_CNT": 480,
                     "HBIN_PF": "P", "HBIN_NAM": "PASS"}, [
    w2(b"\x0e\x00"),          # REC_LEN = 14
    b(b"\x01"),               # REC_TYP = 1
    b(b"\x28"),               # REC_SUB = 40
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x02"),               # SITE_NUM U*1 = 2
    w2(b"\x01\x00"),          # HBIN_NUM U*2 = 1
    w4(b"\xe0\x01\x00\x00"),  # HBIN_CNT U*4 = 480
    b(b"P"),                  # HBIN_PF C*1 = "P"
    b(b"\x04PASS"),           # HBIN_NAM C*n, count 4
])

# --- STDF V4, SBR 1/50 ------------------------------------------------------------------
_pair("SBR", "SBR", {"HEAD_NUM": 255, "SITE_NUM": 0, "SBIN_NUM": 513, "SBIN_CNT": 70000,
                     "SBIN_PF": "F", "SBIN_NAM": "leak_hi"}, [
    w2(b"\x11\x00"),          # REC_LEN = 17
    b(b"\x01"),               # REC_TYP = 1
    b(b"\x32"),               # REC_SUB = 50
    b(b"\xff"),               # HEAD_NUM U*1 = 255
    b(b"\x00"),               # SITE_NUM U*1 = 0
    w2(b"\x01\x02"),          # SBIN_NUM U*2 = 513 (0x0201)
    w4(b"\x70\x11\x01\x00"),  # SBIN_CNT U*4 = 70000 (0x00011170)
    b(b"F"),                  # SBIN_PF C*1 = "F"
    b(b"\x07leak_hi"),        # SBIN_NAM C*n, count 7
])

# --- STDF V4, PMR 1/60 ------------------------------------------------------------------
_pair("PMR", "PMR", {"PMR_INDX": 7, "CHAN_TYP": 0, "CHAN_NAM": "ch7", "PHY_NAM": "P07",
                     "LOG_NAM": "sda", "HEAD_NUM": 1, "SITE_NUM": 1}, [
    w2(b"\x12\x00"),          # REC_LEN = 18
    b(b"\x01"),               # REC_TYP = 1
    b(b"\x3c"),               # REC_SUB = 60
    w2(b"\x07\x00"),          # PMR_INDX U*2 = 7
    w2(b"\x00\x00"),          # CHAN_TYP U*2 = 0
    b(b"\x03ch7"),            # CHAN_NAM C*n, count 3
    b(b"\x03P07"),            # PHY_NAM C*n, count 3
    b(b"\x03sda"),            # LOG_NAM C*n, count 3
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x01"),               # SITE_NUM U*1 = 1
])

# --- STDF V4, PGR 1/62 (PMR_INDX is kxU2, k = INDX_CNT) ---------------------------------
_pair("PGR", "PGR", {"GRP_INDX": 32768, "GRP_NAM": "bus", "INDX_CNT": 3,
                     "PMR_INDX": [1, 2, 258]}, [
    w2(b"\x0e\x00"),          # REC_LEN = 14
    b(b"\x01"),               # REC_TYP = 1
    b(b"\x3e"),               # REC_SUB = 62
    w2(b"\x00\x80"),          # GRP_INDX U*2 = 32768
    b(b"\x03bus"),            # GRP_NAM C*n, count 3
    w2(b"\x03\x00"),          # INDX_CNT U*2 = 3
    w2(b"\x01\x00"            # PMR_INDX[0] U*2 = 1
       b"\x02\x00"            # PMR_INDX[1] U*2 = 2
       b"\x02\x01"),          # PMR_INDX[2] U*2 = 258 (0x0102)
])

# --- STDF V4, PLR 1/63 (kxU2, kxU1 and kxC*n arrays, k = GRP_CNT) -----------------------
_pair("PLR", "PLR", {"GRP_CNT": 2, "GRP_INDX": [32768, 32769], "GRP_MODE": [16, 32],
                     "GRP_RADX": [2, 16], "PGM_CHAR": ["01", "HL"], "RTN_CHAR": ["LH", ""],
                     "PGM_CHAL": ["", "x"], "RTN_CHAL": ["", ""]}, [
    w2(b"\x1b\x00"),          # REC_LEN = 27
    b(b"\x01"),               # REC_TYP = 1
    b(b"\x3f"),               # REC_SUB = 63
    w2(b"\x02\x00"),          # GRP_CNT U*2 = 2
    w2(b"\x00\x80"            # GRP_INDX[0] U*2 = 32768
       b"\x01\x80"),          # GRP_INDX[1] U*2 = 32769
    w2(b"\x10\x00"            # GRP_MODE[0] U*2 = 16
       b"\x20\x00"),          # GRP_MODE[1] U*2 = 32
    b(b"\x02"                 # GRP_RADX[0] U*1 = 2
      b"\x10"),               # GRP_RADX[1] U*1 = 16
    b(b"\x0201"               # PGM_CHAR[0] C*n = "01"
      b"\x02HL"),             # PGM_CHAR[1] C*n = "HL"
    b(b"\x02LH"               # RTN_CHAR[0] C*n = "LH"
      b"\x00"),               # RTN_CHAR[1] C*n = ""
    b(b"\x00"                 # PGM_CHAL[0] C*n = ""
      b"\x01x"),              # PGM_CHAL[1] C*n = "x"
    b(b"\x00"                 # RTN_CHAL[0] C*n = ""
      b"\x00"),               # RTN_CHAL[1] C*n = ""
])

# --- STDF V4, RDR 1/70 ------------------------------------------------------------------
_pair("RDR", "RDR", {"NUM_BINS": 3, "RTST_BIN": [5, 6, 300]}, [
    w2(b"\x08\x00"),          # REC_LEN = 8
    b(b"\x01"),               # REC_TYP = 1
    b(b"\x46"),               # REC_SUB = 70
    w2(b"\x03\x00"),          # NUM_BINS U*2 = 3
    w2(b"\x05\x00"            # RTST_BIN[0] U*2 = 5
       b"\x06\x00"            # RTST_BIN[1] U*2 = 6
       b"\x2c\x01"),          # RTST_BIN[2] U*2 = 300
])

# --- STDF V4, SDR 1/80 (SITE_NUM is kxU1, k = SITE_CNT) ---------------------------------
_pair("SDR", "SDR", {
    "HEAD_NUM": 1, "SITE_GRP": 1, "SITE_CNT": 4, "SITE_NUM": [0, 1, 2, 3],
    "HAND_TYP": "hx", "HAND_ID": "h1", "CARD_TYP": "", "CARD_ID": "pc9", "LOAD_TYP": "",
    "LOAD_ID": "", "DIB_TYP": "", "DIB_ID": "", "CABL_TYP": "", "CABL_ID": "",
    "CONT_TYP": "", "CONT_ID": "", "LASR_TYP": "", "LASR_ID": "", "EXTR_TYP": "",
    "EXTR_ID": "e",
}, [
    w2(b"\x1f\x00"),          # REC_LEN = 31
    b(b"\x01"),               # REC_TYP = 1
    b(b"\x50"),               # REC_SUB = 80
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x01"),               # SITE_GRP U*1 = 1
    b(b"\x04"),               # SITE_CNT U*1 = 4
    b(b"\x00\x01\x02\x03"),   # SITE_NUM kxU*1 = [0, 1, 2, 3]
    b(b"\x02hx"),             # HAND_TYP C*n, count 2
    b(b"\x02h1"),             # HAND_ID C*n, count 2
    b(b"\x00"),               # CARD_TYP C*n, empty
    b(b"\x03pc9"),            # CARD_ID C*n, count 3
    b(b"\x00"),               # LOAD_TYP C*n, empty
    b(b"\x00"),               # LOAD_ID C*n, empty
    b(b"\x00"),               # DIB_TYP C*n, empty
    b(b"\x00"),               # DIB_ID C*n, empty
    b(b"\x00"),               # CABL_TYP C*n, empty
    b(b"\x00"),               # CABL_ID C*n, empty
    b(b"\x00"),               # CONT_TYP C*n, empty
    b(b"\x00"),               # CONT_ID C*n, empty
    b(b"\x00"),               # LASR_TYP C*n, empty
    b(b"\x00"),               # LASR_ID C*n, empty
    b(b"\x00"),               # EXTR_TYP C*n, empty
    b(b"\x01e"),              # EXTR_ID C*n, count 1
])

# --- STDF V4, WIR 2/10 ------------------------------------------------------------------
_pair("WIR", "WIR", {"HEAD_NUM": 1, "SITE_GRP": 255, "START_T": 1700000000,
                     "WAFER_ID": "W03"}, [
    w2(b"\x0a\x00"),          # REC_LEN = 10
    b(b"\x02"),               # REC_TYP = 2
    b(b"\x0a"),               # REC_SUB = 10
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\xff"),               # SITE_GRP U*1 = 255
    w4(b"\x00\xf1\x53\x65"),  # START_T U*4 = 1700000000
    b(b"\x03W03"),            # WAFER_ID C*n, count 3
])

# --- STDF V4, WRR 2/20 (truncated after MASK_ID: USR_DESC, EXC_DESC omitted) ------------
_pair("WRR-trunc", "WRR", {
    "HEAD_NUM": 1, "SITE_GRP": 255, "FINISH_T": 1700003600, "PART_CNT": 500,
    "RTST_CNT": 0, "ABRT_CNT": 1, "GOOD_CNT": 480, "FUNC_CNT": 490, "WAFER_ID": "W03",
    "FABWF_ID": "", "FRAME_ID": "", "MASK_ID": "m1",
}, [
    w2(b"\x23\x00"),          # REC_LEN = 35
    b(b"\x02"),               # REC_TYP = 2
    b(b"\x14"),               # REC_SUB = 20
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\xff"),               # SITE_GRP U*1 = 255
    w4(b"\x10\xff\x53\x65"),  # FINISH_T U*4 = 1700003600
    w4(b"\xf4\x01\x00\x00"),  # PART_CNT U*4 = 500
    w4(b"\x00\x00\x00\x00"),  # RTST_CNT U*4 = 0
    w4(b"\x01\x00\x00\x00"),  # ABRT_CNT U*4 = 1
    w4(b"\xe0\x01\x00\x00"),  # GOOD_CNT U*4 = 480
    w4(b"\xea\x01\x00\x00"),  # FUNC_CNT U*4 = 490
    b(b"\x03W03"),            # WAFER_ID C*n, count 3
    b(b"\x00"),               # FABWF_ID C*n, empty
    b(b"\x00"),               # FRAME_ID C*n, empty
    b(b"\x02m1"),             # MASK_ID C*n, count 2
])

# --- STDF V4, WCR 2/30 ------------------------------------------------------------------
_pair("WCR", "WCR", {"WAFR_SIZ": 200.0, "DIE_HT": 1.5, "DIE_WID": 0.75, "WF_UNITS": 3,
                     "WF_FLAT": "D", "CENTER_X": -1, "CENTER_Y": 300, "POS_X": "R",
                     "POS_Y": "U"}, [
    w2(b"\x14\x00"),          # REC_LEN = 20
    b(b"\x02"),               # REC_TYP = 2
    b(b"\x1e"),               # REC_SUB = 30
    w4(b"\x00\x00\x48\x43"),  # WAFR_SIZ R*4 = 200.0 (0x43480000)
    w4(b"\x00\x00\xc0\x3f"),  # DIE_HT R*4 = 1.5 (0x3FC00000)
    w4(b"\x00\x00\x40\x3f"),  # DIE_WID R*4 = 0.75 (0x3F400000)
    b(b"\x03"),               # WF_UNITS U*1 = 3
    b(b"D"),                  # WF_FLAT C*1 = "D"
    w2(b"\xff\xff"),          # CENTER_X I*2 = -1
    w2(b"\x2c\x01"),          # CENTER_Y I*2 = 300
    b(b"R"),                  # POS_X C*1 = "R"
    b(b"U"),                  # POS_Y C*1 = "U"
])

# --- STDF V4, PIR 5/10 ------------------------------------------------------------------
_pair("PIR", "PIR", {"HEAD_NUM": 1, "SITE_NUM": 3}, [
    w2(b"\x02\x00"),          # REC_LEN = 2
    b(b"\x05"),               # REC_TYP = 5
    b(b"\x0a"),               # REC_SUB = 10
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x03"),               # SITE_NUM U*1 = 3
])

# --- STDF V4, PRR 5/20 (every field, PART_FIX B*n included) -----------------------------
_pair("PRR", "PRR", {
    "HEAD_NUM": 1, "SITE_NUM": 3, "PART_FLG": 0x08, "NUM_TEST": 1234, "HARD_BIN": 5,
    "SOFT_BIN": 513, "X_COORD": -3, "Y_COORD": 12, "TEST_T": 1250, "PART_ID": "17",
    "PART_TXT": "", "PART_FIX": b"\x01\xfe",
}, [
    w2(b"\x18\x00"),          # REC_LEN = 24
    b(b"\x05"),               # REC_TYP = 5
    b(b"\x14"),               # REC_SUB = 20
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x03"),               # SITE_NUM U*1 = 3
    b(b"\x08"),               # PART_FLG B*1 = bit 3: part failed
    w2(b"\xd2\x04"),          # NUM_TEST U*2 = 1234
    w2(b"\x05\x00"),          # HARD_BIN U*2 = 5
    w2(b"\x01\x02"),          # SOFT_BIN U*2 = 513
    w2(b"\xfd\xff"),          # X_COORD I*2 = -3
    w2(b"\x0c\x00"),          # Y_COORD I*2 = 12
    w4(b"\xe2\x04\x00\x00"),  # TEST_T U*4 = 1250 (ms)
    b(b"\x0217"),             # PART_ID C*n, count 2
    b(b"\x00"),               # PART_TXT C*n, empty
    b(b"\x02\x01\xfe"),       # PART_FIX B*n, count 2, bytes 01 FE
])

# --- STDF V4, TSR 10/30 (OPT_FLAG 0x30: TST_SUMS, TST_SQRS flagged invalid) -------------
_pair("TSR", "TSR", {
    "HEAD_NUM": 1, "SITE_NUM": 3, "TEST_TYP": "P", "TEST_NUM": 10000, "EXEC_CNT": 500,
    "FAIL_CNT": 2, "ALRM_CNT": 0, "TEST_NAM": "vdd_leak", "SEQ_NAME": "dc",
    "TEST_LBL": "", "OPT_FLAG": 0x30, "TEST_TIM": 0.125, "TEST_MIN": 0.0625,
    "TEST_MAX": 0.25, "TST_SUMS": 0.0, "TST_SQRS": 0.0,
}, [
    w2(b"\x35\x00"),          # REC_LEN = 53
    b(b"\x0a"),               # REC_TYP = 10
    b(b"\x1e"),               # REC_SUB = 30
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x03"),               # SITE_NUM U*1 = 3
    b(b"P"),                  # TEST_TYP C*1 = "P" (parametric)
    w4(b"\x10\x27\x00\x00"),  # TEST_NUM U*4 = 10000
    w4(b"\xf4\x01\x00\x00"),  # EXEC_CNT U*4 = 500
    w4(b"\x02\x00\x00\x00"),  # FAIL_CNT U*4 = 2
    w4(b"\x00\x00\x00\x00"),  # ALRM_CNT U*4 = 0
    b(b"\x08vdd_leak"),       # TEST_NAM C*n, count 8
    b(b"\x02dc"),             # SEQ_NAME C*n, count 2
    b(b"\x00"),               # TEST_LBL C*n, empty
    b(b"\x30"),               # OPT_FLAG B*1 = bits 4, 5
    w4(b"\x00\x00\x00\x3e"),  # TEST_TIM R*4 = 0.125 s
    w4(b"\x00\x00\x80\x3d"),  # TEST_MIN R*4 = 0.0625
    w4(b"\x00\x00\x80\x3e"),  # TEST_MAX R*4 = 0.25
    w4(b"\x00\x00\x00\x00"),  # TST_SUMS R*4 = 0.0
    w4(b"\x00\x00\x00\x00"),  # TST_SQRS R*4 = 0.0
])

# --- STDF V4, PTR 15/10 (every field) ---------------------------------------------------
_PTR_FULL = {
    "TEST_NUM": 10000, "HEAD_NUM": 1, "SITE_NUM": 3, "TEST_FLG": 0x00, "PARM_FLG": 0xC0,
    "RESULT": 1.5, "TEST_TXT": "vdd_leak", "ALARM_ID": "", "OPT_FLAG": 0x00,
    "RES_SCAL": -3, "LLM_SCAL": 0, "HLM_SCAL": 3, "LO_LIMIT": -0.25, "HI_LIMIT": 2.0,
    "UNITS": "V", "C_RESFMT": "%7.3f", "C_LLMFMT": "", "C_HLMFMT": "", "LO_SPEC": -1.0,
    "HI_SPEC": 3.0,
}
_pair("PTR-full", "PTR", _PTR_FULL, [
    w2(b"\x34\x00"),          # REC_LEN = 52
    b(b"\x0f"),               # REC_TYP = 15
    b(b"\x0a"),               # REC_SUB = 10
    w4(b"\x10\x27\x00\x00"),  # TEST_NUM U*4 = 10000
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x03"),               # SITE_NUM U*1 = 3
    b(b"\x00"),               # TEST_FLG B*1 = 0 (passed, valid)
    b(b"\xc0"),               # PARM_FLG B*1 = bits 6, 7 (>= low, <= high)
    w4(b"\x00\x00\xc0\x3f"),  # RESULT R*4 = 1.5
    b(b"\x08vdd_leak"),       # TEST_TXT C*n, count 8
    b(b"\x00"),               # ALARM_ID C*n, empty
    b(b"\x00"),               # OPT_FLAG B*1 = 0
    b(b"\xfd"),               # RES_SCAL I*1 = -3
    b(b"\x00"),               # LLM_SCAL I*1 = 0
    b(b"\x03"),               # HLM_SCAL I*1 = 3
    w4(b"\x00\x00\x80\xbe"),  # LO_LIMIT R*4 = -0.25
    w4(b"\x00\x00\x00\x40"),  # HI_LIMIT R*4 = 2.0
    b(b"\x01V"),              # UNITS C*n, count 1
    b(b"\x05%7.3f"),          # C_RESFMT C*n, count 5
    b(b"\x00"),               # C_LLMFMT C*n, empty
    b(b"\x00"),               # C_HLMFMT C*n, empty
    w4(b"\x00\x00\x80\xbf"),  # LO_SPEC R*4 = -1.0
    w4(b"\x00\x00\x40\x40"),  # HI_SPEC R*4 = 3.0
])

# STDF V4, PTR 15/10 -- the same record written out in big-endian by hand (no swap helper).
VECTORS.append(Vector("PTR-full-be-literal", "PTR", ">", _PTR_FULL, (
    b"\x00\x34"            # REC_LEN U*2 = 52
    b"\x0f"                # REC_TYP = 15
    b"\x0a"                # REC_SUB = 10
    b"\x00\x00\x27\x10"    # TEST_NUM U*4 = 10000
    b"\x01"                # HEAD_NUM U*1 = 1
    b"\x03"                # SITE_NUM U*1 = 3
    b"\x00"                # TEST_FLG B*1 = 0
    b"\xc0"                # PARM_FLG B*1 = 0xC0
    b"\x3f\xc0\x00\x00"    # RESULT R*4 = 1.5
    b"\x08vdd_leak"        # TEST_TXT C*n, count 8
    b"\x00"                # ALARM_ID C*n, empty
    b"\x00"                # OPT_FLAG B*1 = 0
    b"\xfd"                # RES_SCAL I*1 = -3
    b"\x00"                # LLM_SCAL I*1 = 0
    b"\x03"                # HLM_SCAL I*1 = 3
    b"\xbe\x80\x00\x00"    # LO_LIMIT R*4 = -0.25
    b"\x40\x00\x00\x00"    # HI_LIMIT R*4 = 2.0
    b"\x01V"               # UNITS C*n, count 1
    b"\x05%7.3f"           # C_RESFMT C*n, count 5
    b"\x00"                # C_LLMFMT C*n, empty
    b"\x00"                # C_HLMFMT C*n, empty
    b"\xbf\x80\x00\x00"    # LO_SPEC R*4 = -1.0
    b"\x40\x40\x00\x00"    # HI_SPEC R*4 = 3.0
)))

# --- STDF V4, PTR 15/10 (truncated after RESULT: the usual later PTR of a test) ---------
_pair("PTR-after-result", "PTR", {"TEST_NUM": 10000, "HEAD_NUM": 1, "SITE_NUM": 3,
                                  "TEST_FLG": 0x80, "PARM_FLG": 0x08, "RESULT": 2.5}, [
    w2(b"\x0c\x00"),          # REC_LEN = 12
    b(b"\x0f"),               # REC_TYP = 15
    b(b"\x0a"),               # REC_SUB = 10
    w4(b"\x10\x27\x00\x00"),  # TEST_NUM U*4 = 10000
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x03"),               # SITE_NUM U*1 = 3
    b(b"\x80"),               # TEST_FLG B*1 = bit 7: test failed
    b(b"\x08"),               # PARM_FLG B*1 = bit 3: above high limit
    w4(b"\x00\x00\x20\x40"),  # RESULT R*4 = 2.5
])

# --- STDF V4, PTR 15/10 (a later PTR of test 10000 written in full, with missing values) -
# The standard's missing values (PTR notes, "Default Data"; from memory of the standard,
# as the notes sheet states it): a C*n of length 0 for UNITS and the three format
# strings, and OPT_FLAG bits 2 and 3 for LO_SPEC and HI_SPEC. A later PTR takes those
# fields from the first PTR of its test number (PTR-full here): UNITS "V", C_RESFMT
# "%7.3f", LO_SPEC -1.0, HI_SPEC 3.0; the fields it does give are its own.
_pair("PTR-blank-units", "PTR", {"TEST_NUM": 10000, "HEAD_NUM": 1, "SITE_NUM": 3,
                                 "TEST_FLG": 0x00, "PARM_FLG": 0x00, "RESULT": 0.75,
                                 "TEST_TXT": "", "ALARM_ID": "", "OPT_FLAG": 0x0C,
                                 "RES_SCAL": -3, "LLM_SCAL": 0, "HLM_SCAL": 3,
                                 "LO_LIMIT": 0.5, "HI_LIMIT": 2.0, "UNITS": "",
                                 "C_RESFMT": "", "C_LLMFMT": "", "C_HLMFMT": "",
                                 "LO_SPEC": 0.0, "HI_SPEC": 0.0}, [
    w2(b"\x26\x00"),          # REC_LEN = 38
    b(b"\x0f"),               # REC_TYP = 15
    b(b"\x0a"),               # REC_SUB = 10
    w4(b"\x10\x27\x00\x00"),  # TEST_NUM U*4 = 10000
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x03"),               # SITE_NUM U*1 = 3
    b(b"\x00"),               # TEST_FLG B*1 = 0
    b(b"\x00"),               # PARM_FLG B*1 = 0
    w4(b"\x00\x00\x40\x3f"),  # RESULT R*4 = 0.75
    b(b"\x00"),               # TEST_TXT C*n, empty
    b(b"\x00"),               # ALARM_ID C*n, empty
    b(b"\x0c"),               # OPT_FLAG B*1 = bits 2, 3: LO_SPEC, HI_SPEC invalid
    b(b"\xfd"),               # RES_SCAL I*1 = -3
    b(b"\x00"),               # LLM_SCAL I*1 = 0
    b(b"\x03"),               # HLM_SCAL I*1 = 3
    w4(b"\x00\x00\x00\x3f"),  # LO_LIMIT R*4 = 0.5 (its own, not the default -0.25)
    w4(b"\x00\x00\x00\x40"),  # HI_LIMIT R*4 = 2.0
    b(b"\x00"),               # UNITS C*n, length 0: missing
    b(b"\x00"),               # C_RESFMT C*n, length 0: missing
    b(b"\x00"),               # C_LLMFMT C*n, length 0: missing
    b(b"\x00"),               # C_HLMFMT C*n, length 0: missing
    w4(b"\x00\x00\x00\x00"),  # LO_SPEC R*4 = 0.0, flagged invalid
    w4(b"\x00\x00\x00\x00"),  # HI_SPEC R*4 = 0.0, flagged invalid
])

# --- STDF V4, PTR 15/10 (truncated after TEST_TXT) --------------------------------------
_pair("PTR-after-text", "PTR", {"TEST_NUM": 10001, "HEAD_NUM": 1, "SITE_NUM": 0,
                                "TEST_FLG": 0x00, "PARM_FLG": 0x00, "RESULT": -0.25,
                                "TEST_TXT": "idd_q"}, [
    w2(b"\x12\x00"),          # REC_LEN = 18
    b(b"\x0f"),               # REC_TYP = 15
    b(b"\x0a"),               # REC_SUB = 10
    w4(b"\x11\x27\x00\x00"),  # TEST_NUM U*4 = 10001
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x00"),               # SITE_NUM U*1 = 0
    b(b"\x00"),               # TEST_FLG B*1 = 0
    b(b"\x00"),               # PARM_FLG B*1 = 0
    w4(b"\x00\x00\x80\xbe"),  # RESULT R*4 = -0.25
    b(b"\x05idd_q"),          # TEST_TXT C*n, count 5
])

# --- STDF V4, PTR 15/10 (OPT_FLAG 0xCD, truncated after HI_LIMIT) -----------------------
# OPT_FLAG bits 0 (RES_SCAL invalid), 2 (no low spec), 3 (no high spec), 6 (no low limit),
# 7 (no high limit): the flagged fields are still present as bytes, value 0.
_pair("PTR-optflag", "PTR", {"TEST_NUM": 10002, "HEAD_NUM": 1, "SITE_NUM": 1,
                             "TEST_FLG": 0x40, "PARM_FLG": 0x00, "RESULT": 0.5,
                             "TEST_TXT": "", "ALARM_ID": "", "OPT_FLAG": 0xCD,
                             "RES_SCAL": 0, "LLM_SCAL": 0, "HLM_SCAL": 0, "LO_LIMIT": 0.0,
                             "HI_LIMIT": 0.0}, [
    w2(b"\x1a\x00"),          # REC_LEN = 26
    b(b"\x0f"),               # REC_TYP = 15
    b(b"\x0a"),               # REC_SUB = 10
    w4(b"\x12\x27\x00\x00"),  # TEST_NUM U*4 = 10002
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x01"),               # SITE_NUM U*1 = 1
    b(b"\x40"),               # TEST_FLG B*1 = bit 6: no pass/fail indication
    b(b"\x00"),               # PARM_FLG B*1 = 0
    w4(b"\x00\x00\x00\x3f"),  # RESULT R*4 = 0.5
    b(b"\x00"),               # TEST_TXT C*n, empty
    b(b"\x00"),               # ALARM_ID C*n, empty
    b(b"\xcd"),               # OPT_FLAG B*1 = 0xCD (bits 0, 2, 3, 6, 7)
    b(b"\x00"),               # RES_SCAL I*1 = 0
    b(b"\x00"),               # LLM_SCAL I*1 = 0
    b(b"\x00"),               # HLM_SCAL I*1 = 0
    w4(b"\x00\x00\x00\x00"),  # LO_LIMIT R*4 = 0.0
    w4(b"\x00\x00\x00\x00"),  # HI_LIMIT R*4 = 0.0
])

# --- STDF V4, MPR 15/15 (every field; RTN_ICNT j = 3 is odd, RSLT_CNT k = 2) -----------
# RTN_STAT jxN*1 packs two nibbles per byte, first item in the low nibble:
# [1, 2, 15] -> 0x21, 0x0F (the last byte's high nibble is unused).
_MPR_FULL = {
    "TEST_NUM": 20000, "HEAD_NUM": 1, "SITE_NUM": 2, "TEST_FLG": 0x00, "PARM_FLG": 0x00,
    "RTN_ICNT": 3, "RSLT_CNT": 2, "RTN_STAT": [1, 2, 15], "RTN_RSLT": [1.5, -0.25],
    "TEST_TXT": "vih_scan", "ALARM_ID": "", "OPT_FLAG": 0x00, "RES_SCAL": 0,
    "LLM_SCAL": 0, "HLM_SCAL": 0, "LO_LIMIT": -1.0, "HI_LIMIT": 2.0, "START_IN": 0.5,
    "INCR_IN": 0.125, "RTN_INDX": [7, 8, 260], "UNITS": "V", "UNITS_IN": "V",
    "C_RESFMT": "", "C_LLMFMT": "", "C_HLMFMT": "", "LO_SPEC": 0.0, "HI_SPEC": 5.0,
}
_pair("MPR-full", "MPR", _MPR_FULL, [
    w2(b"\x49\x00"),          # REC_LEN = 73
    b(b"\x0f"),               # REC_TYP = 15
    b(b"\x0f"),               # REC_SUB = 15
    w4(b"\x20\x4e\x00\x00"),  # TEST_NUM U*4 = 20000
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x02"),               # SITE_NUM U*1 = 2
    b(b"\x00"),               # TEST_FLG B*1 = 0
    b(b"\x00"),               # PARM_FLG B*1 = 0
    w2(b"\x03\x00"),          # RTN_ICNT U*2 = 3 (j)
    w2(b"\x02\x00"),          # RSLT_CNT U*2 = 2 (k)
    b(b"\x21"                 # RTN_STAT jxN*1: item 0 = 1 (low nibble), item 1 = 2 (high)
      b"\x0f"),               # RTN_STAT jxN*1: item 2 = 15 (low nibble)
    w4(b"\x00\x00\xc0\x3f"    # RTN_RSLT[0] R*4 = 1.5
       b"\x00\x00\x80\xbe"),  # RTN_RSLT[1] R*4 = -0.25
    b(b"\x08vih_scan"),       # TEST_TXT C*n, count 8
    b(b"\x00"),               # ALARM_ID C*n, empty
    b(b"\x00"),               # OPT_FLAG B*1 = 0
    b(b"\x00"),               # RES_SCAL I*1 = 0
    b(b"\x00"),               # LLM_SCAL I*1 = 0
    b(b"\x00"),               # HLM_SCAL I*1 = 0
    w4(b"\x00\x00\x80\xbf"),  # LO_LIMIT R*4 = -1.0
    w4(b"\x00\x00\x00\x40"),  # HI_LIMIT R*4 = 2.0
    w4(b"\x00\x00\x00\x3f"),  # START_IN R*4 = 0.5
    w4(b"\x00\x00\x00\x3e"),  # INCR_IN R*4 = 0.125
    w2(b"\x07\x00"            # RTN_INDX[0] U*2 = 7
       b"\x08\x00"            # RTN_INDX[1] U*2 = 8
       b"\x04\x01"),          # RTN_INDX[2] U*2 = 260 (0x0104)
    b(b"\x01V"),              # UNITS C*n, count 1
    b(b"\x01V"),              # UNITS_IN C*n, count 1
    b(b"\x00"),               # C_RESFMT C*n, empty
    b(b"\x00"),               # C_LLMFMT C*n, empty
    b(b"\x00"),               # C_HLMFMT C*n, empty
    w4(b"\x00\x00\x00\x00"),  # LO_SPEC R*4 = 0.0
    w4(b"\x00\x00\xa0\x40"),  # HI_SPEC R*4 = 5.0
])

# STDF V4, MPR 15/15 -- truncated after RTN_RSLT, one return (j = 1: one byte, low nibble).
_pair("MPR-short", "MPR", {"TEST_NUM": 20000, "HEAD_NUM": 1, "SITE_NUM": 2,
                           "TEST_FLG": 0x00, "PARM_FLG": 0x00, "RTN_ICNT": 1,
                           "RSLT_CNT": 1, "RTN_STAT": [9], "RTN_RSLT": [3.0]}, [
    w2(b"\x11\x00"),          # REC_LEN = 17
    b(b"\x0f"),               # REC_TYP = 15
    b(b"\x0f"),               # REC_SUB = 15
    w4(b"\x20\x4e\x00\x00"),  # TEST_NUM U*4 = 20000
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x02"),               # SITE_NUM U*1 = 2
    b(b"\x00"),               # TEST_FLG B*1 = 0
    b(b"\x00"),               # PARM_FLG B*1 = 0
    w2(b"\x01\x00"),          # RTN_ICNT U*2 = 1
    w2(b"\x01\x00"),          # RSLT_CNT U*2 = 1
    b(b"\x09"),               # RTN_STAT jxN*1 = [9] (low nibble)
    w4(b"\x00\x00\x40\x40"),  # RTN_RSLT[0] R*4 = 3.0
])

# STDF V4, MPR 15/15 -- the full record in big-endian, written out by hand (no swap helper).
VECTORS.append(Vector("MPR-full-be-literal", "MPR", ">", _MPR_FULL, (
    b"\x00\x49"            # REC_LEN U*2 = 73
    b"\x0f"                # REC_TYP = 15
    b"\x0f"                # REC_SUB = 15
    b"\x00\x00\x4e\x20"    # TEST_NUM U*4 = 20000
    b"\x01"                # HEAD_NUM U*1 = 1
    b"\x02"                # SITE_NUM U*1 = 2
    b"\x00"                # TEST_FLG B*1 = 0
    b"\x00"                # PARM_FLG B*1 = 0
    b"\x00\x03"            # RTN_ICNT U*2 = 3
    b"\x00\x02"            # RSLT_CNT U*2 = 2
    b"\x21\x0f"            # RTN_STAT 3xN*1 = [1, 2, 15] (nibble order is not byte order)
    b"\x3f\xc0\x00\x00"    # RTN_RSLT[0] R*4 = 1.5
    b"\xbe\x80\x00\x00"    # RTN_RSLT[1] R*4 = -0.25
    b"\x08vih_scan"        # TEST_TXT C*n, count 8
    b"\x00"                # ALARM_ID C*n, empty
    b"\x00"                # OPT_FLAG B*1 = 0
    b"\x00\x00\x00"        # RES_SCAL, LLM_SCAL, HLM_SCAL I*1 = 0, 0, 0
    b"\xbf\x80\x00\x00"    # LO_LIMIT R*4 = -1.0
    b"\x40\x00\x00\x00"    # HI_LIMIT R*4 = 2.0
    b"\x3f\x00\x00\x00"    # START_IN R*4 = 0.5
    b"\x3e\x00\x00\x00"    # INCR_IN R*4 = 0.125
    b"\x00\x07\x00\x08\x01\x04"  # RTN_INDX 3xU*2 = [7, 8, 260]
    b"\x01V"               # UNITS C*n, count 1
    b"\x01V"               # UNITS_IN C*n, count 1
    b"\x00\x00\x00"        # C_RESFMT, C_LLMFMT, C_HLMFMT C*n, all empty
    b"\x00\x00\x00\x00"    # LO_SPEC R*4 = 0.0
    b"\x40\xa0\x00\x00"    # HI_SPEC R*4 = 5.0
)))

# --- STDF V4, FTR 15/20 (every field) ---------------------------------------------------
# RTN_STAT [3, 4, 5] packs to 0x43, 0x05; PGM_STAT [12] to 0x0C. FAIL_PIN D*n: U*2 bit
# count 16, then ceil(16/8) = 2 bytes; SPIN_MAP D*n: 8 bits, 1 byte.
_pair("FTR", "FTR", {
    "TEST_NUM": 30000, "HEAD_NUM": 1, "SITE_NUM": 2, "TEST_FLG": 0x80, "OPT_FLAG": 0x00,
    "CYCL_CNT": 123456, "REL_VADR": 16, "REPT_CNT": 1, "NUM_FAIL": 3, "XFAIL_AD": -2,
    "YFAIL_AD": 70000, "VECT_OFF": -1, "RTN_ICNT": 3, "PGM_ICNT": 1,
    "RTN_INDX": [1, 2, 513], "RTN_STAT": [3, 4, 5], "PGM_INDX": [9], "PGM_STAT": [12],
    "FAIL_PIN": b"\xa5\x01", "VECT_NAM": "pat_a", "TIME_SET": "ts1", "OP_CODE": "",
    "TEST_TXT": "scan_chain", "ALARM_ID": "", "PROG_TXT": "", "RSLT_TXT": "fail",
    "PATG_NUM": 255, "SPIN_MAP": b"\x80",
}, [
    w2(b"\x56\x00"),          # REC_LEN = 86
    b(b"\x0f"),               # REC_TYP = 15
    b(b"\x14"),               # REC_SUB = 20
    w4(b"\x30\x75\x00\x00"),  # TEST_NUM U*4 = 30000
    b(b"\x01"),               # HEAD_NUM U*1 = 1
    b(b"\x02"),               # SITE_NUM U*1 = 2
    b(b"\x80"),               # TEST_FLG B*1 = bit 7: test failed
    b(b"\x00"),               # OPT_FLAG B*1 = 0
    w4(b"\x40\xe2\x01\x00"),  # CYCL_CNT U*4 = 123456 (0x0001E240)
    w4(b"\x10\x00\x00\x00"),  # REL_VADR U*4 = 16
    w4(b"\x01\x00\x00\x00"),  # REPT_CNT U*4 = 1
    w4(b"\x03\x00\x00\x00"),  # NUM_FAIL U*4 = 3
    w4(b"\xfe\xff\xff\xff"),  # XFAIL_AD I*4 = -2
    w4(b"\x70\x11\x01\x00"),  # YFAIL_AD I*4 = 70000
    w2(b"\xff\xff"),          # VECT_OFF I*2 = -1
    w2(b"\x03\x00"),          # RTN_ICNT U*2 = 3 (j)
    w2(b"\x01\x00"),          # PGM_ICNT U*2 = 1 (k)
    w2(b"\x01\x00"            # RTN_INDX[0] U*2 = 1
       b"\x02\x00"            # RTN_INDX[1] U*2 = 2
       b"\x01\x02"),          # RTN_INDX[2] U*2 = 513
    b(b"\x43"                 # RTN_STAT jxN*1: 3 (low nibble), 4 (high nibble)
      b"\x05"),               # RTN_STAT jxN*1: 5 (low nibble)
    w2(b"\x09\x00"),          # PGM_INDX[0] U*2 = 9
    b(b"\x0c"),               # PGM_STAT kxN*1 = [12]
    w2(b"\x10\x00"),          # FAIL_PIN D*n bit count U*2 = 16
    b(b"\xa5\x01"),           # FAIL_PIN D*n data, 2 bytes
    b(b"\x05pat_a"),          # VECT_NAM C*n, count 5
    b(b"\x03ts1"),            # TIME_SET C*n, count 3
    b(b"\x00"),               # OP_CODE C*n, empty
    b(b"\x0ascan_chain"),     # TEST_TXT C*n, count 10
    b(b"\x00"),               # ALARM_ID C*n, empty
    b(b"\x00"),               # PROG_TXT C*n, empty
    b(b"\x04fail"),           # RSLT_TXT C*n, count 4
    b(b"\xff"),               # PATG_NUM U*1 = 255
    w2(b"\x08\x00"),          # SPIN_MAP D*n bit count U*2 = 8
    b(b"\x80"),               # SPIN_MAP D*n data, 1 byte
])

# --- STDF V4, BPS 20/10 -----------------------------------------------------------------
_pair("BPS", "BPS", {"SEQ_NAME": "dc_tests"}, [
    w2(b"\x09\x00"),          # REC_LEN = 9
    b(b"\x14"),               # REC_TYP = 20
    b(b"\x0a"),               # REC_SUB = 10
    b(b"\x08dc_tests"),       # SEQ_NAME C*n, count 8
])

# --- STDF V4, EPS 20/20 (no fields: header only) ----------------------------------------
_pair("EPS", "EPS", {}, [
    w2(b"\x00\x00"),          # REC_LEN = 0
    b(b"\x14"),               # REC_TYP = 20
    b(b"\x14"),               # REC_SUB = 20
])

# --- STDF V4, GDR 50/10 (the type codes the brief names: pad 0, U1, I2, R4, C*n) --------
# Pad bytes (code 0) put the I*2 and R*4 data on even offsets of the data, as the standard
# asks writers to; our codec neither inserts nor demands them.
_pair("GDR-basic", "GDR", {"FLD_CNT": 6, "GEN_DATA": [
    ("U1", 7), ("B0", None), ("I2", -2), ("B0", None), ("R4", 1.5), ("Cn", "TT"),
]}, [
    w2(b"\x12\x00"),          # REC_LEN = 18
    b(b"\x32"),               # REC_TYP = 50
    b(b"\x0a"),               # REC_SUB = 10
    w2(b"\x06\x00"),          # FLD_CNT U*2 = 6
    b(b"\x01\x07"),           # GEN_DATA[0] V*n: code 1 (U*1), value 7
    b(b"\x00"),               # GEN_DATA[1] V*n: code 0 (B*0 pad), no data
    b(b"\x05"),               # GEN_DATA[2] V*n: code 5 (I*2)
    w2(b"\xfe\xff"),          #   value I*2 = -2
    b(b"\x00"),               # GEN_DATA[3] V*n: code 0 (pad)
    b(b"\x07"),               # GEN_DATA[4] V*n: code 7 (R*4)
    w4(b"\x00\x00\xc0\x3f"),  #   value R*4 = 1.5
    b(b"\x0a\x02TT"),         # GEN_DATA[5] V*n: code 10 (C*n), count 2, "TT"
])

# STDF V4, GDR 50/10 -- every V*n type code the standard defines (0-8, 10-13).
# N*1 as a V*n value takes one whole byte, the nibble in the low half (from memory).
_pair("GDR-all", "GDR", {"FLD_CNT": 18, "GEN_DATA": [
    ("U1", 7), ("B0", None), ("I2", -2), ("B0", None), ("R4", 1.5), ("Cn", "ab"),
    ("B0", None), ("U2", 513), ("I1", -1), ("B0", None), ("U4", 70000), ("B0", None),
    ("I4", -2), ("B0", None), ("R8", -0.25), ("Bn", b"\x01\x02"), ("Dn", b"\xff"),
    ("N1", 9),
]}, [
    w2(b"\x38\x00"),          # REC_LEN = 56
    b(b"\x32"),               # REC_TYP = 50
    b(b"\x0a"),               # REC_SUB = 10
    w2(b"\x12\x00"),          # FLD_CNT U*2 = 18
    b(b"\x01\x07"),           # [0] code 1 U*1 = 7
    b(b"\x00"),               # [1] code 0 pad
    b(b"\x05"),               # [2] code 5 I*2
    w2(b"\xfe\xff"),          #     = -2
    b(b"\x00"),               # [3] code 0 pad
    b(b"\x07"),               # [4] code 7 R*4
    w4(b"\x00\x00\xc0\x3f"),  #     = 1.5
    b(b"\x0a\x02ab"),         # [5] code 10 C*n, count 2, "ab"
    b(b"\x00"),               # [6] code 0 pad
    b(b"\x02"),               # [7] code 2 U*2
    w2(b"\x01\x02"),          #     = 513
    b(b"\x04\xff"),           # [8] code 4 I*1 = -1
    b(b"\x00"),               # [9] code 0 pad
    b(b"\x03"),               # [10] code 3 U*4
    w4(b"\x70\x11\x01\x00"),  #     = 70000
    b(b"\x00"),               # [11] code 0 pad
    b(b"\x06"),               # [12] code 6 I*4
    w4(b"\xfe\xff\xff\xff"),  #     = -2
    b(b"\x00"),               # [13] code 0 pad
    b(b"\x08"),               # [14] code 8 R*8
    w8(b"\x00\x00\x00\x00\x00\x00\xd0\xbf"),  # = -0.25 (0xBFD0000000000000)
    b(b"\x0b\x02\x01\x02"),   # [15] code 11 B*n, count 2, bytes 01 02
    b(b"\x0c"),               # [16] code 12 D*n
    w2(b"\x08\x00"),          #     bit count U*2 = 8
    b(b"\xff"),               #     data, 1 byte
    b(b"\x0d\x09"),           # [17] code 13 N*1 = 9
])

# --- STDF V4, DTR 50/30 -----------------------------------------------------------------
_pair("DTR", "DTR", {"TEXT_DAT": "TT block=dc site=1 start_us=0 end_us=250"}, [
    w2(b"\x29\x00"),          # REC_LEN = 41
    b(b"\x32"),               # REC_TYP = 50
    b(b"\x1e"),               # REC_SUB = 30
    b(b"\x28TT block=dc site=1 start_us=0 end_us=250"),  # TEXT_DAT C*n, count 40
])

# STDF V4, DTR 50/30 -- a byte above 0x7F: C*n is read as Latin-1 (0xB0 = degree sign).
_pair("DTR-latin1", "DTR", {"TEXT_DAT": "25\u00b0C"}, [
    w2(b"\x05\x00"),          # REC_LEN = 5
    b(b"\x32"),               # REC_TYP = 50
    b(b"\x1e"),               # REC_SUB = 30
    b(b"\x0425\xb0C"),        # TEXT_DAT C*n, count 4: "2", "5", 0xB0, "C"
])


# --- Records the catalogue does not know (skipped by length) ---------------------------
def _unknown(id: str, typ: int, sub: int, rows: list[_Row]) -> None:
    for endian, suffix in (("<", "le"), (">", "be")):
        UNKNOWN.append(Unknown(f"{id}-{suffix}", typ, sub, endian, _assemble(rows, endian)))


# STDF V4-2007 addendum, VUR 0/30 (Version Update Record). Payload layout from memory
# (UPD_CNT U*1, UPD_NAM kxC*n); to us it is opaque: only REC_LEN matters.
_unknown("VUR", 0, 30, [
    w2(b"\x0d\x00"),          # REC_LEN = 13
    b(b"\x00"),               # REC_TYP = 0
    b(b"\x1e"),               # REC_SUB = 30
    b(b"\x01"),               # UPD_CNT U*1 = 1
    b(b"\x0bScan:2007.1"),    # UPD_NAM[0] C*n, count 11
])

# STDF V4-2007 addendum, PSR 1/90 (Pattern Sequence Record). Leading fields from memory
# (CONT_FLG B*1, PSR_INDX U*2, PSR_NAM C*n, OPT_FLG B*1, TOTP_CNT U*2, LOCP_CNT U*2, then
# arrays, empty here); opaque to us.
_unknown("PSR", 1, 90, [
    w2(b"\x0b\x00"),          # REC_LEN = 11
    b(b"\x01"),               # REC_TYP = 1
    b(b"\x5a"),               # REC_SUB = 90
    b(b"\x00"),               # CONT_FLG B*1 = 0
    w2(b"\x01\x00"),          # PSR_INDX U*2 = 1
    b(b"\x02ps"),             # PSR_NAM C*n, count 2
    b(b"\x00"),               # OPT_FLG B*1 = 0
    w2(b"\x00\x00"),          # TOTP_CNT U*2 = 0
    w2(b"\x00\x00"),          # LOCP_CNT U*2 = 0
])

# A type the 2007 addendum also adds, STR 15/30, here with an opaque 3-byte payload.
_unknown("STR", 15, 30, [
    w2(b"\x03\x00"),          # REC_LEN = 3
    b(b"\x0f"),               # REC_TYP = 15
    b(b"\x1e"),               # REC_SUB = 30
    b(b"\xde\xad\x01"),       # payload, not interpreted
])
