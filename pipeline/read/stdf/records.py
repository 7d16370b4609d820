"""The STDF V4 record catalogue: every record as data, not branches.

Each layout is copied from the *Standard Test Data Format (STDF) Specification, Version 4*,
record by record (field names and order as the standard spells them). Every decoder (the
compiled engine, which gets its layouts from ``columnar.layout``, the numpy one in
``columnar.py``/``walk.py``, the per-record reference in ``codec.py`` and the stream
reference in ``reference.py``) and the writer are driven by this one table, so a layout
fixed here is fixed everywhere. So are the default-data rules at the end.

Type codes are the standard's: ``C1 Cn B1 Bn Dn N1 U1 U2 U4 I1 I2 I4 R4 R8 Vn``. An
array field (the standard's ``kxTYPE``) names the earlier field holding its length in
``count``.
"""

from __future__ import annotations

from dataclasses import dataclass

# Fixed byte sizes of the scalar types (STDF V4, "Data Type Codes and Representation").
FIXED_SIZE = {
    "U1": 1, "U2": 2, "U4": 4, "I1": 1, "I2": 2, "I4": 4, "R4": 4, "R8": 8,
    "C1": 1, "B1": 1,
}
NUMPY_CODE = {
    "U1": "u1", "U2": "u2", "U4": "u4", "I1": "i1", "I2": "i2", "I4": "i4",
    "R4": "f4", "R8": "f8", "B1": "u1", "N1": "u1",
}
VARIABLE = {"Cn", "Bn", "Dn", "Vn"}


@dataclass(frozen=True)
class Field:
    name: str
    type: str
    count: str | None = None  # the field holding the array length (kxTYPE)

    @property
    def is_array(self) -> bool:
        return self.count is not None


@dataclass(frozen=True)
class Record:
    name: str
    typ: int
    sub: int
    fields: tuple[Field, ...]

    @property
    def key(self) -> tuple[int, int]:
        return (self.typ, self.sub)

    def field(self, name: str) -> Field:
        for f in self.fields:
            if f.name == name:
                return f
        raise KeyError(f"{self.name} has no field {name}")


def _f(spec: str) -> tuple[Field, ...]:
    """Parse a compact layout: ``"NAME:TYPE NAME:kTYPE@COUNT ..."``."""
    out = []
    for item in spec.split():
        name, typ = item.split(":")
        if "@" in typ:
            typ, count = typ.split("@")
            out.append(Field(name, typ, count))
        else:
            out.append(Field(name, typ))
    return tuple(out)


def _cn(*names: str) -> str:
    return " ".join(f"{n}:Cn" for n in names)


_LAYOUTS: list[tuple[str, int, int, str]] = [
    # STDF V4, FAR 0/10: File Attributes Record
    ("FAR", 0, 10, "CPU_TYPE:U1 STDF_VER:U1"),
    # STDF V4, ATR 0/20: Audit Trail Record
    ("ATR", 0, 20, "MOD_TIM:U4 CMD_LINE:Cn"),
    # STDF V4, MIR 1/10: Master Information Record
    ("MIR", 1, 10,
     "SETUP_T:U4 START_T:U4 STAT_NUM:U1 MODE_COD:C1 RTST_COD:C1 PROT_COD:C1 BURN_TIM:U2 "
     "CMOD_COD:C1 " + _cn(
         "LOT_ID", "PART_TYP", "NODE_NAM", "TSTR_TYP", "JOB_NAM", "JOB_REV", "SBLOT_ID",
         "OPER_NAM", "EXEC_TYP", "EXEC_VER", "TEST_COD", "TST_TEMP", "USER_TXT", "AUX_FILE",
         "PKG_TYP", "FAMLY_ID", "DATE_COD", "FACIL_ID", "FLOOR_ID", "PROC_ID", "OPER_FRQ",
         "SPEC_NAM", "SPEC_VER", "FLOW_ID", "SETUP_ID", "DSGN_REV", "ENG_ID", "ROM_COD",
         "SERL_NUM", "SUPR_NAM")),
    # STDF V4, MRR 1/20: Master Results Record
    ("MRR", 1, 20, "FINISH_T:U4 DISP_COD:C1 USR_DESC:Cn EXC_DESC:Cn"),
    # STDF V4, PCR 1/30: Part Count Record
    ("PCR", 1, 30,
     "HEAD_NUM:U1 SITE_NUM:U1 PART_CNT:U4 RTST_CNT:U4 ABRT_CNT:U4 GOOD_CNT:U4 FUNC_CNT:U4"),
    # STDF V4, HBR 1/40: Hardware Bin Record
    ("HBR", 1, 40,
     "HEAD_NUM:U1 SITE_NUM:U1 HBIN_NUM:U2 HBIN_CNT:U4 HBIN_PF:C1 HBIN_NAM:Cn"),
    # STDF V4, SBR 1/50: Software Bin Record
    ("SBR", 1, 50,
     "HEAD_NUM:U1 SITE_NUM:U1 SBIN_NUM:U2 SBIN_CNT:U4 SBIN_PF:C1 SBIN_NAM:Cn"),
    # STDF V4, PMR 1/60: Pin Map Record
    ("PMR", 1, 60,
     "PMR_INDX:U2 CHAN_TYP:U2 CHAN_NAM:Cn PHY_NAM:Cn LOG_NAM:Cn HEAD_NUM:U1 SITE_NUM:U1"),
    # STDF V4, PGR 1/62: Pin Group Record
    ("PGR", 1, 62, "GRP_INDX:U2 GRP_NAM:Cn INDX_CNT:U2 PMR_INDX:U2@INDX_CNT"),
    # STDF V4, PLR 1/63: Pin List Record
    ("PLR", 1, 63,
     "GRP_CNT:U2 GRP_INDX:U2@GRP_CNT GRP_MODE:U2@GRP_CNT GRP_RADX:U1@GRP_CNT "
     "PGM_CHAR:Cn@GRP_CNT RTN_CHAR:Cn@GRP_CNT PGM_CHAL:Cn@GRP_CNT RTN_CHAL:Cn@GRP_CNT"),
    # STDF V4, RDR 1/70: Retest Data Record
    ("RDR", 1, 70, "NUM_BINS:U2 RTST_BIN:U2@NUM_BINS"),
    # STDF V4, SDR 1/80: Site Description Record
    ("SDR", 1, 80,
     "HEAD_NUM:U1 SITE_GRP:U1 SITE_CNT:U1 SITE_NUM:U1@SITE_CNT " + _cn(
         "HAND_TYP", "HAND_ID", "CARD_TYP", "CARD_ID", "LOAD_TYP", "LOAD_ID", "DIB_TYP",
         "DIB_ID", "CABL_TYP", "CABL_ID", "CONT_TYP", "CONT_ID", "LASR_TYP", "LASR_ID",
         "EXTR_TYP", "EXTR_ID")),
    # STDF V4, WIR 2/10: Wafer Information Record
    ("WIR", 2, 10, "HEAD_NUM:U1 SITE_GRP:U1 START_T:U4 WAFER_ID:Cn"),
    # STDF V4, WRR 2/20: Wafer Results Record
    ("WRR", 2, 20,
     "HEAD_NUM:U1 SITE_GRP:U1 FINISH_T:U4 PART_CNT:U4 RTST_CNT:U4 ABRT_CNT:U4 GOOD_CNT:U4 "
     "FUNC_CNT:U4 " + _cn("WAFER_ID", "FABWF_ID", "FRAME_ID", "MASK_ID", "USR_DESC",
                          "EXC_DESC")),
    # STDF V4, WCR 2/30: Wafer Configuration Record
    ("WCR", 2, 30,
     "WAFR_SIZ:R4 DIE_HT:R4 DIE_WID:R4 WF_UNITS:U1 WF_FLAT:C1 CENTER_X:I2 CENTER_Y:I2 "
     "POS_X:C1 POS_Y:C1"),
    # STDF V4, PIR 5/10: Part Information Record
    ("PIR", 5, 10, "HEAD_NUM:U1 SITE_NUM:U1"),
    # STDF V4, PRR 5/20: Part Results Record
    ("PRR", 5, 20,
     "HEAD_NUM:U1 SITE_NUM:U1 PART_FLG:B1 NUM_TEST:U2 HARD_BIN:U2 SOFT_BIN:U2 X_COORD:I2 "
     "Y_COORD:I2 TEST_T:U4 PART_ID:Cn PART_TXT:Cn PART_FIX:Bn"),
    # STDF V4, TSR 10/30: Test Synopsis Record
    ("TSR", 10, 30,
     "HEAD_NUM:U1 SITE_NUM:U1 TEST_TYP:C1 TEST_NUM:U4 EXEC_CNT:U4 FAIL_CNT:U4 ALRM_CNT:U4 "
     "TEST_NAM:Cn SEQ_NAME:Cn TEST_LBL:Cn OPT_FLAG:B1 TEST_TIM:R4 TEST_MIN:R4 TEST_MAX:R4 "
     "TST_SUMS:R4 TST_SQRS:R4"),
    # STDF V4, PTR 15/10: Parametric Test Record
    ("PTR", 15, 10,
     "TEST_NUM:U4 HEAD_NUM:U1 SITE_NUM:U1 TEST_FLG:B1 PARM_FLG:B1 RESULT:R4 TEST_TXT:Cn "
     "ALARM_ID:Cn OPT_FLAG:B1 RES_SCAL:I1 LLM_SCAL:I1 HLM_SCAL:I1 LO_LIMIT:R4 HI_LIMIT:R4 "
     "UNITS:Cn C_RESFMT:Cn C_LLMFMT:Cn C_HLMFMT:Cn LO_SPEC:R4 HI_SPEC:R4"),
    # STDF V4, MPR 15/15: Multiple-Result Parametric Record
    ("MPR", 15, 15,
     "TEST_NUM:U4 HEAD_NUM:U1 SITE_NUM:U1 TEST_FLG:B1 PARM_FLG:B1 RTN_ICNT:U2 RSLT_CNT:U2 "
     "RTN_STAT:N1@RTN_ICNT RTN_RSLT:R4@RSLT_CNT TEST_TXT:Cn ALARM_ID:Cn OPT_FLAG:B1 "
     "RES_SCAL:I1 LLM_SCAL:I1 HLM_SCAL:I1 LO_LIMIT:R4 HI_LIMIT:R4 START_IN:R4 INCR_IN:R4 "
     "RTN_INDX:U2@RTN_ICNT UNITS:Cn UNITS_IN:Cn C_RESFMT:Cn C_LLMFMT:Cn C_HLMFMT:Cn "
     "LO_SPEC:R4 HI_SPEC:R4"),
    # STDF V4, FTR 15/20: Functional Test Record
    ("FTR", 15, 20,
     "TEST_NUM:U4 HEAD_NUM:U1 SITE_NUM:U1 TEST_FLG:B1 OPT_FLAG:B1 CYCL_CNT:U4 REL_VADR:U4 "
     "REPT_CNT:U4 NUM_FAIL:U4 XFAIL_AD:I4 YFAIL_AD:I4 VECT_OFF:I2 RTN_ICNT:U2 PGM_ICNT:U2 "
     "RTN_INDX:U2@RTN_ICNT RTN_STAT:N1@RTN_ICNT PGM_INDX:U2@PGM_ICNT PGM_STAT:N1@PGM_ICNT "
     "FAIL_PIN:Dn VECT_NAM:Cn TIME_SET:Cn OP_CODE:Cn TEST_TXT:Cn ALARM_ID:Cn PROG_TXT:Cn "
     "RSLT_TXT:Cn PATG_NUM:U1 SPIN_MAP:Dn"),
    # STDF V4, BPS 20/10: Begin Program Section Record
    ("BPS", 20, 10, "SEQ_NAME:Cn"),
    # STDF V4, EPS 20/20: End Program Section Record (no fields)
    ("EPS", 20, 20, ""),
    # STDF V4, GDR 50/10: Generic Data Record
    ("GDR", 50, 10, "FLD_CNT:U2 GEN_DATA:Vn@FLD_CNT"),
    # STDF V4, DTR 50/30: Datalog Text Record
    ("DTR", 50, 30, "TEXT_DAT:Cn"),
]

RECORDS: dict[tuple[int, int], Record] = {
    (typ, sub): Record(name, typ, sub, _f(spec)) for name, typ, sub, spec in _LAYOUTS
}
BY_NAME: dict[str, Record] = {r.name: r for r in RECORDS.values()}

# Generic-data type codes of a V*n field (STDF V4, GDR 50/10): code -> type.
VN_TYPES = {0: "B0", 1: "U1", 2: "U2", 3: "U4", 4: "I1", 5: "I2", 6: "I4", 7: "R4", 8: "R8",
            10: "Cn", 11: "Bn", 12: "Dn", 13: "N1"}

# Records whose fields the default-data rule covers (STDF V4, PTR 15/10 and MPR 15/15
# "Default Data"): every field after OPT_FLAG, taken from the first record of a test
# number when a later one does not give its own value. A value is not given when the
# field is cut off by REC_LEN, flagged invalid in OPT_FLAG (DEFAULT_BITS), or written
# with the field's own missing value: a C*n of length 0 (UNITS, UNITS_IN and the format
# strings; STDF V4 "Optional fields and missing/invalid data").
DEFAULTED = {
    "PTR": ("RES_SCAL", "LLM_SCAL", "HLM_SCAL", "LO_LIMIT", "HI_LIMIT", "UNITS", "C_RESFMT",
            "C_LLMFMT", "C_HLMFMT", "LO_SPEC", "HI_SPEC"),
    "MPR": ("RES_SCAL", "LLM_SCAL", "HLM_SCAL", "LO_LIMIT", "HI_LIMIT", "START_IN",
            "INCR_IN", "RTN_INDX", "UNITS", "UNITS_IN", "C_RESFMT", "C_LLMFMT", "C_HLMFMT",
            "LO_SPEC", "HI_SPEC"),
}

# OPT_FLAG bits that make this record's value of a field invalid, so the default applies
# (STDF V4, PTR 15/10: bit 0 RES_SCAL, bit 2 LO_SPEC, bit 3 HI_SPEC, bit 4 LO_LIMIT,
# bit 5 HI_LIMIT; MPR 15/15 the same, and bit 1 START_IN and INCR_IN).
DEFAULT_BITS = {
    "PTR": {"RES_SCAL": 0, "LO_SPEC": 2, "HI_SPEC": 3, "LO_LIMIT": 4, "HI_LIMIT": 5},
    "MPR": {"RES_SCAL": 0, "START_IN": 1, "INCR_IN": 1, "LO_SPEC": 2, "HI_SPEC": 3,
            "LO_LIMIT": 4, "HI_LIMIT": 5},
}
# OPT_FLAG bits that say the test has no such limit at all: no value, default or not
# (bit 6 no low limit, bit 7 no high limit), read from the record's own OPT_FLAG, else
# from the first record's.
NO_LIMIT_BITS = {"LO_LIMIT": 6, "HI_LIMIT": 7}
