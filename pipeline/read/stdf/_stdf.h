/* Shared declarations of the compiled STDF V4 decoder (module pipeline.read.stdf._scan).
 *
 * _scan.c     module, record-boundary scan, one-type column decode (decode())
 * _columns.c  column buffers, one record's fields, default data, text dictionaries
 * _engine.c   the Engine type: a whole batch in one pass (parts, touchdowns, sections,
 *             context columns, fields, default data), state carried across batches
 *
 * Layout of a record type, 6 bytes per field (built by columnar._layout from records.py):
 *   kind, size, index of the field holding the array count (255 none), flags,
 *   OPT_FLAG bit that makes the field invalid (255 none), OPT_FLAG bit that says there is
 *   no such limit at all (255 none).
 */
#ifndef STDF_H
#define STDF_H

#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

enum { K_FIXED = 1, K_C1 = 2, K_CN = 3, K_BN = 4, K_DN = 5, K_ARR = 6, K_NIB = 7 };
#define F_DEFAULT 1 /* default data (STDF V4, PTR 15/10 and MPR 15/15 "Default Data") */
#define F_EMPTY 2   /* a C*n of length 0 is this field's missing value */
#define F_DICT 4    /* text stored dictionary-encoded (int32 indices) */
#define NO_BIT 255
#define MAXF 64
#define LAY_BYTES 6

typedef struct {
    uint8_t kind, size, ci, flags, inv, none;
} lay_t;

/* A growable byte buffer (malloc). */
typedef struct {
    uint8_t *p;
    int64_t len, cap;
} gbuf_t;

int gb_reserve(gbuf_t *g, int64_t more);
void gb_free(gbuf_t *g);

/* One output column of n rows. */
typedef struct {
    uint8_t kind, size, dict;
    int64_t n;
    PyObject *valid_o, *vals_o, *offs_o; /* PyBytes, owned until col_finish */
    uint8_t *valid, *vals;
    int64_t *offs;
    int64_t filled; /* var / array columns: rows whose end offset is written */
    int64_t items;  /* array columns: items so far */
    gbuf_t data;
} col_t;

/* Interned strings of one dictionary-encoded column (raw Latin-1 bytes). */
typedef struct {
    gbuf_t raw;
    int64_t *off; /* count + 1 */
    int64_t count, cap;
    int32_t *table; /* open addressing, -1 empty */
    int64_t tsize;
} dict_t;

/* One field's default value in one test number's slot. */
typedef struct {
    uint8_t valid;
    int64_t v;          /* fixed: native bytes; dict: index */
    int64_t off, items; /* arrays: native item bytes in the blob */
} dval_t;

/* Default data of one record type: test number -> slot. */
typedef struct {
    int nf;
    int64_t *keys; /* open addressing: test number, -1 empty */
    int64_t *slots;
    int64_t tsize, count, cap;
    dval_t *vals;     /* cap * nf */
    uint8_t *opt_ok;  /* the first record's OPT_FLAG was present */
    uint8_t *opt;
    gbuf_t blob;
} dflt_t;

/* What decodes one record type: its layout, its columns, default data if any. */
typedef struct {
    const lay_t *lay;
    int nf, big, test_idx, opt_idx;
    col_t *cols;    /* nf */
    dflt_t *d;      /* NULL: no default data */
    dict_t *dicts;  /* nf, or NULL */
    /* set by rtype_prepare */
    uint8_t is_count[MAXF];
    int prefix_n;       /* leading fixed fields with no default data (valid unless cut) */
    int64_t prefix_bytes;
    int64_t prefix_off[MAXF];
    int n_dfl;          /* fields the default data can fill, in layout order */
    uint8_t dfl[MAXF], dfl_deferred[MAXF];
    int all_deferred;   /* every field the default data fills is a deferred one */
    /* Rows whose cut-off fields take defaults, filled column by column afterwards
     * (rtype_fill_defaults) for fixed and dictionary columns; NULL: fill inline. */
    int64_t *tail_slot;
    uint8_t *tail_from, *tail_opt;
} rtype_t;

int parse_layout(const uint8_t *raw, Py_ssize_t len, lay_t *out, int *nf);
int cols_init(col_t *cols, const lay_t *lay, int nf, int64_t n, int with_dict);
void cols_free(col_t *cols, int nf);
PyObject *col_finish(col_t *c); /* steals the column's buffers */
void rtype_prepare(rtype_t *rt); /* after cols_init */
void rtype_fill_defaults(rtype_t *rt, int64_t n);
int decode_record(rtype_t *rt, const uint8_t *b, int64_t pos, int64_t end, int64_t r);
void dict_free(dict_t *d);
PyObject *dict_export(dict_t *d);
void dflt_free(dflt_t *d);
PyObject *bitmap_or_none(PyObject *valid_o, int64_t n);

static inline uint64_t rd(const uint8_t *p, int size, int big) {
    uint64_t v = 0;
    for (int i = 0; i < size; i++) v = (v << 8) | p[big ? i : size - 1 - i];
    return v;
}

/* Values are stored native (little-endian on every machine we build for). The sizes
 * are spelled out so that each copy is one load and one store. */
static inline void put(uint8_t *dst, const uint8_t *src, int size, int big) {
    switch (size) {
    case 1:
        *dst = *src;
        return;
    case 2: {
        uint16_t v;
        memcpy(&v, src, 2);
        if (big) v = __builtin_bswap16(v);
        memcpy(dst, &v, 2);
        return;
    }
    case 4: {
        uint32_t v;
        memcpy(&v, src, 4);
        if (big) v = __builtin_bswap32(v);
        memcpy(dst, &v, 4);
        return;
    }
    case 8: {
        uint64_t v;
        memcpy(&v, src, 8);
        if (big) v = __builtin_bswap64(v);
        memcpy(dst, &v, 8);
        return;
    }
    default:
        for (int i = 0; i < size; i++) dst[i] = src[big ? size - 1 - i : i];
    }
}

static inline void set_bit(uint8_t *bits, int64_t r) { bits[r >> 3] |= (uint8_t)(1u << (r & 7)); }
static inline void clear_bit(uint8_t *bits, int64_t r) {
    bits[r >> 3] &= (uint8_t)~(1u << (r & 7));
}

#endif
