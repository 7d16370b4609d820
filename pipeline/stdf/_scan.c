/* Record-boundary scan for STDF V4 streams.
 *
 * The one step of decoding that cannot be vectorised: each record's position depends on
 * the REC_LEN of the one before it (STDF V4, "Record header": REC_LEN U*2, REC_TYP U*1,
 * REC_SUB U*1). Everything after this scan is done column-wise with numpy.
 *
 * scan(buf, start, big_endian) -> (offsets, lengths, types, subs, end)
 *   offsets: bytes holding int64 header offsets of every *complete* record from `start`
 *   lengths: bytes holding uint16 REC_LEN values
 *   types, subs: bytes holding uint8 REC_TYP / REC_SUB
 *   end: offset of the first byte not consumed (start of an incomplete record, or len)
 * A pure-Python twin lives in scan.py and is used when this module is not built.
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

static PyObject *scan(PyObject *self, PyObject *args) {
    Py_buffer view;
    Py_ssize_t start;
    int big;
    if (!PyArg_ParseTuple(args, "y*ni", &view, &start, &big)) return NULL;
    const uint8_t *b = (const uint8_t *)view.buf;
    Py_ssize_t n = view.len, pos = start, count = 0;
    if (pos < 0) pos = 0;
    while (pos + 4 <= n) {
        Py_ssize_t len = big ? ((Py_ssize_t)b[pos] << 8) | b[pos + 1]
                             : ((Py_ssize_t)b[pos + 1] << 8) | b[pos];
        if (pos + 4 + len > n) break;
        count++;
        pos += 4 + len;
    }
    PyObject *offs = PyBytes_FromStringAndSize(NULL, count * 8);
    PyObject *lens = PyBytes_FromStringAndSize(NULL, count * 2);
    PyObject *typs = PyBytes_FromStringAndSize(NULL, count);
    PyObject *subs = PyBytes_FromStringAndSize(NULL, count);
    if (!offs || !lens || !typs || !subs) {
        Py_XDECREF(offs); Py_XDECREF(lens); Py_XDECREF(typs); Py_XDECREF(subs);
        PyBuffer_Release(&view);
        return NULL;
    }
    int64_t *o = (int64_t *)PyBytes_AS_STRING(offs);
    uint16_t *l = (uint16_t *)PyBytes_AS_STRING(lens);
    uint8_t *t = (uint8_t *)PyBytes_AS_STRING(typs);
    uint8_t *s = (uint8_t *)PyBytes_AS_STRING(subs);
    pos = start < 0 ? 0 : start;
    for (Py_ssize_t k = 0; k < count; k++) {
        uint16_t len = big ? (uint16_t)((b[pos] << 8) | b[pos + 1])
                           : (uint16_t)((b[pos + 1] << 8) | b[pos]);
        o[k] = (int64_t)pos;
        l[k] = len;
        t[k] = b[pos + 2];
        s[k] = b[pos + 3];
        pos += 4 + (Py_ssize_t)len;
    }
    PyBuffer_Release(&view);
    return Py_BuildValue("NNNNn", offs, lens, typs, subs, pos);
}

/* Column-wise field decoding of many records of one type (see columnar.py).
 *
 * decode(buf, offs, lens, layout, big_endian) -> list, one item per field:
 *   fixed (kind 1):   (valid, values)          values: n * size bytes, native order
 *   var   (kind 3-5): (valid, offsets, data)   offsets: (n + 1) int64
 *   array (kind 6-7): (valid, offsets, values) offsets: (n + 1) int64 item counts
 * valid: n bytes, 1 where the field is present. `layout` holds 3 bytes per field:
 * kind, size, index of the field holding the array count (255 = none). The rules are
 * the standard's: a field is present only while REC_LEN covers it (STDF V4, "Optional
 * fields and missing/invalid data"); a C*n whose length runs past REC_LEN is absent and
 * ends the record. N*1 arrays pack two items per byte, first in the low nibble.
 */
enum { K_FIXED = 1, K_CN = 3, K_BN = 4, K_DN = 5, K_ARR = 6, K_NIB = 7 };
#define MAXF 64

typedef struct {
    uint8_t *valid;  /* n bytes */
    uint8_t *vals;   /* fixed: n * size bytes */
    int64_t *offs;   /* var / array: n + 1 offsets */
    uint8_t *data;   /* var / array: grown as needed (malloc) */
    int64_t cap, len;
} col_t;

static inline uint64_t rd(const uint8_t *p, int size, int big) {
    uint64_t v = 0;
    for (int i = 0; i < size; i++) v = (v << 8) | p[big ? i : size - 1 - i];
    return v;
}

static inline void put(uint8_t *dst, const uint8_t *src, int size, int big) {
    /* values are stored native (little-endian on every machine we build for) */
    if (!big) {
        switch (size) {
        case 1: *dst = *src; return;
        case 2: memcpy(dst, src, 2); return;
        case 4: memcpy(dst, src, 4); return;
        case 8: memcpy(dst, src, 8); return;
        default: memcpy(dst, src, (size_t)size); return;
        }
    }
    for (int i = 0; i < size; i++) dst[i] = src[size - 1 - i];
}

static int reserve(col_t *c, int64_t more) {
    if (c->len + more <= c->cap) return 0;
    int64_t cap = c->cap ? c->cap : 4096;
    while (cap < c->len + more) cap *= 2;
    uint8_t *d = (uint8_t *)realloc(c->data, (size_t)cap);
    if (!d) return -1;
    c->data = d;
    c->cap = cap;
    return 0;
}

/* One record, one pass. Returns -1 when memory runs out. */
static int walk(const uint8_t *b, int64_t pos, int64_t end, const uint8_t *layout, int nf,
                const uint8_t *is_count, int big, int64_t r, col_t *cols) {
    int64_t counts[MAXF];
    int alive = 1;
    for (int f = 0; f < nf; f++) {
        int kind = layout[3 * f], size = layout[3 * f + 1], ci = layout[3 * f + 2];
        col_t *c = &cols[f];
        int64_t need = 0, items = 0, skip;
        counts[f] = 0;
        if (!alive) goto absent;
        switch (kind) {
        case K_FIXED:
            if (pos + size > end) goto absent;
            if (is_count[f]) counts[f] = (int64_t)rd(b + pos, size, big);
            put(c->vals + r * size, b + pos, size, big);
            pos += size;
            break;
        case K_CN: case K_BN: case K_DN:
            skip = kind == K_DN ? 2 : 1;
            if (pos + skip > end) goto absent;
            need = kind == K_DN ? ((int64_t)rd(b + pos, 2, big) + 7) / 8 : b[pos];
            if (pos + skip + need > end) goto absent;
            if (reserve(c, need)) return -1;
            memcpy(c->data + c->len, b + pos + skip, (size_t)need);
            c->len += need;
            pos += skip + need;
            break;
        case K_ARR: case K_NIB:
            items = ci < nf ? counts[ci] : 0;
            need = kind == K_NIB ? (items + 1) / 2 : items * size;
            if (pos + need > end) goto absent;
            if (reserve(c, kind == K_NIB ? items : need)) return -1;
            for (int64_t i = 0; i < items; i++) {
                if (kind == K_NIB)
                    c->data[c->len + i] = (b[pos + i / 2] >> (4 * (i % 2))) & 0x0F;
                else
                    put(c->data + c->len + i * size, b + pos + i * size, size, big);
            }
            c->len += kind == K_NIB ? items : need;
            pos += need;
            break;
        default:
            goto absent;
        }
        c->valid[r] = 1;
        if (kind != K_FIXED) c->offs[r + 1] = kind >= K_ARR ? c->len / (kind == K_NIB ? 1 : size)
                                                            : c->len;
        continue;
    absent:
        alive = 0;
        c->valid[r] = 0;
        if (kind == K_FIXED) memset(c->vals + r * size, 0, (size_t)size);
        else c->offs[r + 1] = kind >= K_ARR ? c->len / (kind == K_NIB ? 1 : size) : c->len;
    }
    return 0;
}

static PyObject *decode(PyObject *self, PyObject *args) {
    Py_buffer buf, offs, lens, lay;
    int big;
    if (!PyArg_ParseTuple(args, "y*y*y*y*i", &buf, &offs, &lens, &lay, &big)) return NULL;
    PyObject *result = NULL, *objs[MAXF][3] = {{0}};
    const uint8_t *b = (const uint8_t *)buf.buf;
    const int64_t *o = (const int64_t *)offs.buf, *l = (const int64_t *)lens.buf;
    const uint8_t *layout = (const uint8_t *)lay.buf;
    int64_t n = offs.len / 8;
    int nf = (int)(lay.len / 3), failed = 0;
    col_t cols[MAXF];
    uint8_t is_count[MAXF] = {0};
    memset(cols, 0, sizeof(cols));
    if (nf > MAXF || lens.len != offs.len) {
        PyErr_SetString(PyExc_ValueError, "bad layout or offsets");
        goto done;
    }
    for (int f = 0; f < nf; f++)
        if (layout[3 * f + 2] < nf) is_count[layout[3 * f + 2]] = 1;
    for (int64_t r = 0; r < n; r++) {
        if (o[r] < 0 || o[r] + l[r] > buf.len) {
            PyErr_SetString(PyExc_ValueError, "record runs past the buffer");
            goto done;
        }
    }
    for (int f = 0; f < nf; f++) {
        int kind = layout[3 * f], size = layout[3 * f + 1];
        objs[f][0] = PyBytes_FromStringAndSize(NULL, n);
        objs[f][1] = PyBytes_FromStringAndSize(NULL, kind == K_FIXED ? n * size : (n + 1) * 8);
        if (!objs[f][0] || !objs[f][1]) goto done;
        cols[f].valid = (uint8_t *)PyBytes_AS_STRING(objs[f][0]);
        if (kind == K_FIXED) {
            cols[f].vals = (uint8_t *)PyBytes_AS_STRING(objs[f][1]);
        } else {
            cols[f].offs = (int64_t *)PyBytes_AS_STRING(objs[f][1]);
            cols[f].offs[0] = 0;
        }
    }
    Py_BEGIN_ALLOW_THREADS
    for (int64_t r = 0; r < n && !failed; r++)
        failed = walk(b, o[r], o[r] + l[r], layout, nf, is_count, big, r, cols);
    Py_END_ALLOW_THREADS
    if (failed) {
        PyErr_NoMemory();
        goto done;
    }
    for (int f = 0; f < nf; f++) {
        if (layout[3 * f] == K_FIXED) continue;
        objs[f][2] = PyBytes_FromStringAndSize((const char *)cols[f].data, cols[f].len);
        if (!objs[f][2]) goto done;
    }
    result = PyList_New(nf);
    if (!result) goto done;
    for (int f = 0; f < nf; f++) {
        PyObject *t = objs[f][2] ? PyTuple_Pack(3, objs[f][0], objs[f][1], objs[f][2])
                                 : PyTuple_Pack(2, objs[f][0], objs[f][1]);
        if (!t) { Py_CLEAR(result); goto done; }
        PyList_SET_ITEM(result, f, t);
    }
done:
    for (int f = 0; f < MAXF; f++) {
        free(cols[f].data);
        for (int k = 0; k < 3; k++) Py_XDECREF(objs[f][k]);
    }
    PyBuffer_Release(&buf); PyBuffer_Release(&offs); PyBuffer_Release(&lens);
    PyBuffer_Release(&lay);
    return result;
}

static PyMethodDef methods[] = {
    {"scan", scan, METH_VARARGS, "Scan complete STDF record headers from an offset."},
    {"decode", decode, METH_VARARGS, "Decode the fields of many records of one type."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {PyModuleDef_HEAD_INIT, "_scan", NULL, -1, methods};

PyMODINIT_FUNC PyInit__scan(void) { return PyModule_Create(&module); }
