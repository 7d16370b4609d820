/* The compiled STDF V4 decoder: module pipeline.read.stdf._scan (see _stdf.h for the parts).
 *
 * scan(buf, start, big_endian) -> (offsets, lengths, types, subs, end)
 *   The one step of decoding that cannot be vectorised: each record's position depends
 *   on the REC_LEN of the one before it (STDF V4, "Record header": REC_LEN U*2,
 *   REC_TYP U*1, REC_SUB U*1).
 *   offsets: bytes holding int64 header offsets of every *complete* record from `start`
 *   lengths: bytes holding uint16 REC_LEN values
 *   types, subs: bytes holding uint8 REC_TYP / REC_SUB
 *   end: offset of the first byte not consumed (start of an incomplete record, or len)
 *
 * decode(buf, offs, lens, layout, big_endian) -> list, one column per field, of the
 *   records of one type whose payloads start at offs (no default data): see col_finish
 *   for the column tuples.
 *
 * Engine: a whole batch in one pass (_engine.c).
 * A pure-Python twin of each lives in scan.py, columnar.py and walk.py and is used when
 * this module is not built.
 */
#include "_stdf.h"

extern PyTypeObject EngineType;

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

static PyObject *decode(PyObject *self, PyObject *args) {
    Py_buffer buf, offs, lens, lay;
    int big, nf = 0;
    if (!PyArg_ParseTuple(args, "y*y*y*y*i", &buf, &offs, &lens, &lay, &big)) return NULL;
    PyObject *result = NULL;
    lay_t layout[MAXF];
    col_t cols[MAXF];
    rtype_t rt;
    const int64_t *o = (const int64_t *)offs.buf, *l = (const int64_t *)lens.buf;
    int64_t n = offs.len / 8;
    memset(cols, 0, sizeof(cols));
    if (parse_layout((const uint8_t *)lay.buf, lay.len, layout, &nf) || lens.len != offs.len) {
        PyErr_SetString(PyExc_ValueError, "bad layout or offsets");
        goto done;
    }
    for (int64_t r = 0; r < n; r++) {
        if (o[r] < 0 || l[r] < 0 || o[r] + l[r] > buf.len) {
            PyErr_SetString(PyExc_ValueError, "record runs past the buffer");
            goto done;
        }
    }
    memset(&rt, 0, sizeof(rt));
    rt.lay = layout;
    rt.nf = nf;
    rt.big = big;
    rt.test_idx = rt.opt_idx = -1;
    rt.cols = cols;
    if (cols_init(cols, layout, nf, n, 0)) goto done;
    rtype_prepare(&rt);
    int failed = 0;
    Py_BEGIN_ALLOW_THREADS
    for (int64_t r = 0; r < n && !failed; r++)
        failed = decode_record(&rt, (const uint8_t *)buf.buf, o[r], o[r] + l[r], r);
    Py_END_ALLOW_THREADS
    if (failed) {
        PyErr_NoMemory();
        goto done;
    }
    result = PyList_New(nf);
    if (!result) goto done;
    for (int f = 0; f < nf; f++) {
        PyObject *c = col_finish(&cols[f]);
        if (!c) {
            Py_CLEAR(result);
            goto done;
        }
        PyList_SET_ITEM(result, f, c);
    }
done:
    cols_free(cols, nf);
    PyBuffer_Release(&buf);
    PyBuffer_Release(&offs);
    PyBuffer_Release(&lens);
    PyBuffer_Release(&lay);
    return result;
}

static PyMethodDef methods[] = {
    {"scan", scan, METH_VARARGS, "Scan complete STDF record headers from an offset."},
    {"decode", decode, METH_VARARGS, "Decode the fields of many records of one type."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {PyModuleDef_HEAD_INIT, "_scan", NULL, -1, methods};

PyMODINIT_FUNC PyInit__scan(void) {
    if (PyType_Ready(&EngineType) < 0) return NULL;
    PyObject *m = PyModule_Create(&module);
    if (!m) return NULL;
    Py_INCREF(&EngineType);
    if (PyModule_AddObject(m, "Engine", (PyObject *)&EngineType) < 0) {
        Py_DECREF(&EngineType);
        Py_DECREF(m);
        return NULL;
    }
    return m;
}
