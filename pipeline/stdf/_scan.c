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

static PyMethodDef methods[] = {
    {"scan", scan, METH_VARARGS, "Scan complete STDF record headers from an offset."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {PyModuleDef_HEAD_INIT, "_scan", NULL, -1, methods};

PyMODINIT_FUNC PyInit__scan(void) { return PyModule_Create(&module); }
