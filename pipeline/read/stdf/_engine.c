/* The Engine: one batch of records in one pass, state carried across batches.
 *
 * Engine(big_endian, max_depth, specs); specs: one (key, role, layout, test_idx, opt_idx)
 * per record type of the catalogue, key = REC_TYP * 256 + REC_SUB; role: 0 fields only,
 * 1 result (PTR, MPR, FTR), 2 PRR, 3 text (DTR, GDR), 4 structure only (PIR, BPS, EPS:
 * counted, no table); layout None: the fields are read by the reference decoder in Python
 * (GDR's V*n, PLR's arrays of strings), so only the record positions are returned.
 *
 * batch(buf, offs, lens, first_rec) walks the records in file order. Structure, as
 * decoder.py documents it (DESIGN.md attribution rule 2; STDF V4 PIR 5/10, PRR 5/20,
 * BPS 20/10, EPS 20/20): a PIR opens its head/site's part (a PIR on a site whose part is
 * open abandons that part); the first PIR after all parts closed starts a touchdown when
 * the last one overlapped or this site was already in it; a PRR closes the part and gives
 * it the next part_index (a PRR with no PIR is a part of its own); BPS opens a section
 * under the innermost open one, EPS closes it (an EPS with none open is counted and
 * ignored). Every record then gets its context: results the open part of their
 * head/site and the innermost section, DTR/GDR the touchdown and section.
 * It returns (unknown records, [(key, n, context, columns, positions)]) in key order.
 * The numpy path (walk.py) is the same walk in Python.
 */
#include "_stdf.h"

#define KEY_PIR (5 * 256 + 10)
#define KEY_PRR (5 * 256 + 20)
#define KEY_BPS (20 * 256 + 10)
#define KEY_EPS (20 * 256 + 20)
enum { R_FIELDS = 0, R_RESULT = 1, R_PRR = 2, R_TEXT = 3, R_STRUCT = 4 };

typedef struct {
    int key, role, has_layout, nf, test_idx, opt_idx;
    lay_t lay[MAXF];
    dflt_t d;
    int has_dflt;
    dict_t dicts[MAXF];
} spec_t;

typedef struct { int64_t *p; int64_t n, cap; } ivec_t;

static int iv_push(ivec_t *v, int64_t x) {
    if (v->n == v->cap) {
        int64_t cap = v->cap ? 2 * v->cap : 1024;
        int64_t *p = (int64_t *)realloc(v->p, sizeof(int64_t) * (size_t)cap);
        if (!p) return -1;
        v->p = p;
        v->cap = cap;
    }
    v->p[v->n++] = x;
    return 0;
}

typedef struct {
    PyObject_HEAD
    int big, max_depth, nspec;
    spec_t *specs;
    int16_t keymap[65536];
    /* parts */
    int64_t open_pk[65536]; /* (head << 8 | site) -> part key, -1 none */
    int64_t n_open, abandoned, prr_without_pir, eps_without_bps, next_index, touchdown;
    uint8_t td_site[65536];
    uint16_t td_list[65536];
    int64_t n_td_list;
    int td_overlapped;
    ivec_t part_td, part_pir, part_index;
    /* sections */
    int64_t *stack;
    int depth;
    ivec_t sec_parent, sec_depth, sec_td, sec_begin, sec_end, sec_name_off;
    gbuf_t sec_names;
} Engine;

static void engine_dealloc(Engine *e) {
    for (int s = 0; s < e->nspec; s++) {
        dflt_free(&e->specs[s].d);
        for (int f = 0; f < MAXF; f++) dict_free(&e->specs[s].dicts[f]);
    }
    free(e->specs);
    free(e->stack);
    ivec_t *vs[] = {&e->part_td, &e->part_pir, &e->part_index, &e->sec_parent, &e->sec_depth,
                    &e->sec_td, &e->sec_begin, &e->sec_end, &e->sec_name_off};
    for (size_t i = 0; i < sizeof(vs) / sizeof(vs[0]); i++) free(vs[i]->p);
    gb_free(&e->sec_names);
    Py_TYPE(e)->tp_free((PyObject *)e);
}

static int add_spec(Engine *e, PyObject *item, spec_t *s) {
    PyObject *layout;
    if (!PyArg_ParseTuple(item, "iiOii", &s->key, &s->role, &layout, &s->test_idx, &s->opt_idx))
        return -1;
    if (s->key < 0 || s->key > 65535 || s->role < R_FIELDS || s->role > R_STRUCT) {
        PyErr_SetString(PyExc_ValueError, "bad record spec");
        return -1;
    }
    s->has_layout = layout != Py_None;
    if (s->has_layout) {
        Py_buffer lb;
        if (PyObject_GetBuffer(layout, &lb, PyBUF_SIMPLE)) return -1;
        int bad = parse_layout((const uint8_t *)lb.buf, lb.len, s->lay, &s->nf);
        PyBuffer_Release(&lb);
        if (bad) {
            PyErr_SetString(PyExc_ValueError, "bad layout");
            return -1;
        }
        for (int f = 0; f < s->nf; f++) s->has_dflt |= (s->lay[f].flags & F_DEFAULT) != 0;
        s->d.nf = s->nf;
    }
    if (s->test_idx >= s->nf || s->opt_idx >= s->nf) s->test_idx = s->opt_idx = -1;
    if (s->test_idx < 0) s->has_dflt = 0;
    e->keymap[s->key] = (int16_t)(s - e->specs);
    return 0;
}

static int engine_init(Engine *e, PyObject *args, PyObject *kw) {
    PyObject *specs;
    if (!PyArg_ParseTuple(args, "iiO!", &e->big, &e->max_depth, &PyList_Type, &specs)) return -1;
    if (e->max_depth < 0 || e->max_depth > 1 << 20) {
        PyErr_SetString(PyExc_ValueError, "bad max_depth");
        return -1;
    }
    e->nspec = (int)PyList_GET_SIZE(specs);
    e->specs = (spec_t *)calloc((size_t)e->nspec + 1, sizeof(spec_t));
    e->stack = (int64_t *)calloc((size_t)e->max_depth + 1, sizeof(int64_t));
    if (!e->specs || !e->stack) {
        PyErr_NoMemory();
        return -1;
    }
    memset(e->keymap, 0xFF, sizeof(e->keymap));
    for (int s = 0; s < e->nspec; s++)
        if (add_spec(e, PyList_GET_ITEM(specs, s), &e->specs[s])) return -1;
    for (int i = 0; i < 65536; i++) e->open_pk[i] = -1;
    e->touchdown = -1;
    return 0;
}

/* -- structure ------------------------------------------------------------------------- */
static int open_part(Engine *e, int hs, int64_t rec) {
    if (e->open_pk[hs] >= 0) { /* the earlier part on this site never got its PRR */
        e->abandoned++;
        e->open_pk[hs] = -1;
        e->n_open--;
    }
    if (e->n_open == 0) {
        if (e->touchdown < 0 || e->td_overlapped || e->td_site[hs]) {
            e->touchdown++;
            for (int64_t i = 0; i < e->n_td_list; i++) e->td_site[e->td_list[i]] = 0;
            e->n_td_list = 0;
            e->td_overlapped = 0;
        }
    } else {
        e->td_overlapped = 1;
    }
    if (!e->td_site[hs]) {
        e->td_site[hs] = 1;
        e->td_list[e->n_td_list++] = (uint16_t)hs;
    }
    e->open_pk[hs] = e->part_td.n;
    e->n_open++;
    if (iv_push(&e->part_td, e->touchdown) || iv_push(&e->part_pir, rec) ||
        iv_push(&e->part_index, -1))
        return -1;
    return 0;
}

static int64_t close_part(Engine *e, int hs) {
    int64_t pk = e->open_pk[hs];
    if (pk >= 0) {
        e->open_pk[hs] = -1;
        e->n_open--;
    } else { /* a PRR with no PIR: still a part, tested in the current touchdown */
        pk = e->part_td.n;
        if (iv_push(&e->part_td, e->touchdown < 0 ? 0 : e->touchdown) ||
            iv_push(&e->part_pir, -1) || iv_push(&e->part_index, -1))
            return -1;
        e->prr_without_pir++;
    }
    e->part_index.p[pk] = e->next_index++;
    return pk;
}

static int begin_section(Engine *e, const uint8_t *p, int64_t n, int64_t rec) {
    if (e->depth >= e->max_depth) return -2; /* decoder.py stops a batch before such a BPS */
    int64_t ln = n >= 1 ? p[0] : 0;
    if (ln > n - 1) ln = n > 0 ? n - 1 : 0;
    if (iv_push(&e->sec_parent, e->depth ? e->stack[e->depth - 1] : -1) ||
        iv_push(&e->sec_depth, e->depth) ||
        iv_push(&e->sec_td, e->touchdown < 0 ? 0 : e->touchdown) ||
        iv_push(&e->sec_begin, rec) || iv_push(&e->sec_end, -1) ||
        iv_push(&e->sec_name_off, e->sec_names.len) || gb_reserve(&e->sec_names, ln))
        return -1;
    if (ln) memcpy(e->sec_names.p + e->sec_names.len, p + 1, (size_t)ln);
    e->sec_names.len += ln;
    e->stack[e->depth++] = e->sec_parent.n - 1;
    return 0;
}

static void end_section(Engine *e, int64_t rec) {
    if (!e->depth) {
        e->eps_without_bps++;
        return;
    }
    e->sec_end.p[e->stack[--e->depth]] = rec;
}

/* -- one batch ------------------------------------------------------------------------- */
typedef struct {
    int64_t n, row;
    rtype_t rt;
    col_t cols[MAXF];
    PyObject *ctx_o[5], *ctx_valid[5];
    int nctx;
    PyObject *pos_o; /* positions in the batch (reference-decoded types) */
} out_t;

static const int CTX_SIZE[5][4] = {{0}, {8, 4}, {8, 8, 4, 8}, {4, 4}, {0}};
static const int CTX_N[5] = {0, 2, 4, 2, 0};
static const int CTX_NULLABLE[5][4] = {{0}, {0, 1}, {0, 0, 0, 0}, {1, 1}, {0}};

static int out_init(Engine *e, spec_t *s, out_t *o) {
    int64_t n = o->n;
    o->nctx = 1 + CTX_N[s->role];
    o->ctx_o[0] = PyBytes_FromStringAndSize(NULL, (Py_ssize_t)(n * 8)); /* rec_index */
    if (!o->ctx_o[0]) return -1;
    for (int k = 1; k < o->nctx; k++) {
        o->ctx_o[k] = PyBytes_FromStringAndSize(NULL, (Py_ssize_t)(n * CTX_SIZE[s->role][k - 1]));
        if (!o->ctx_o[k]) return -1;
        if (CTX_NULLABLE[s->role][k - 1]) {
            o->ctx_valid[k] = PyBytes_FromStringAndSize(NULL, (Py_ssize_t)((n + 7) / 8));
            if (!o->ctx_valid[k]) return -1;
            memset(PyBytes_AS_STRING(o->ctx_valid[k]), 0, (size_t)((n + 7) / 8));
        }
    }
    if (!s->has_layout) {
        if (s->role != R_STRUCT) {
            o->pos_o = PyBytes_FromStringAndSize(NULL, (Py_ssize_t)(n * 8));
            if (!o->pos_o) return -1;
        }
        return 0;
    }
    rtype_t *rt = &o->rt;
    rt->lay = s->lay;
    rt->nf = s->nf;
    rt->big = e->big;
    rt->test_idx = s->test_idx;
    rt->opt_idx = s->opt_idx;
    rt->cols = o->cols;
    rt->d = s->has_dflt ? &s->d : NULL;
    rt->dicts = s->dicts;
    if (cols_init(o->cols, s->lay, s->nf, n, 1)) return -1;
    rtype_prepare(rt);
    if (rt->d) {
        rt->tail_slot = (int64_t *)malloc(sizeof(int64_t) * (size_t)(n ? n : 1));
        rt->tail_from = (uint8_t *)malloc((size_t)(n ? n : 1));
        rt->tail_opt = (uint8_t *)malloc((size_t)(n ? n : 1));
        if (!rt->tail_slot || !rt->tail_from || !rt->tail_opt) return -1;
    }
    return 0;
}

static void out_free(out_t *o, int nf) {
    for (int k = 0; k < 5; k++) {
        Py_CLEAR(o->ctx_o[k]);
        Py_CLEAR(o->ctx_valid[k]);
    }
    Py_CLEAR(o->pos_o);
    cols_free(o->cols, nf);
    free(o->rt.tail_slot);
    free(o->rt.tail_from);
    free(o->rt.tail_opt);
}

static inline void ctx_put(out_t *o, int k, int size, int64_t r, int64_t v, int nullable) {
    char *p = PyBytes_AS_STRING(o->ctx_o[k]) + r * size;
    if (size == 8) {
        memcpy(p, &v, 8);
    } else {
        int32_t x = (int32_t)v;
        memcpy(p, &x, 4);
    }
    if (nullable && v >= 0) set_bit((uint8_t *)PyBytes_AS_STRING(o->ctx_valid[k]), r);
}

/* The record at payload b[0..n): structure first, then its context columns. */
static int one_record(Engine *e, spec_t *s, out_t *o, const uint8_t *b, int64_t n,
                      int64_t rec, int64_t r) {
    int64_t sec = e->depth ? e->stack[e->depth - 1] : -1;
    ctx_put(o, 0, 8, r, rec, 0);
    if (s->key == KEY_PIR) return open_part(e, n >= 2 ? b[0] << 8 | b[1] : 0, rec);
    if (s->key == KEY_BPS) return begin_section(e, b, n, rec);
    if (s->key == KEY_EPS) {
        end_section(e, rec);
        return 0;
    }
    if (s->key == KEY_PRR) {
        int64_t pk = close_part(e, n >= 2 ? b[0] << 8 | b[1] : 0);
        if (pk < 0) return -1;
        ctx_put(o, 1, 8, r, pk, 0);
        ctx_put(o, 2, 8, r, e->part_index.p[pk], 0);
        ctx_put(o, 3, 4, r, e->part_td.p[pk], 0);
        ctx_put(o, 4, 8, r, e->part_pir.p[pk], 0);
    } else if (s->role == R_RESULT) { /* HEAD_NUM and SITE_NUM follow TEST_NUM U*4 */
        int hs = (n >= 5 ? b[4] << 8 : 0) | (n >= 6 ? b[5] : 0);
        ctx_put(o, 1, 8, r, e->open_pk[hs], 0);
        ctx_put(o, 2, 4, r, sec, 1);
    } else if (s->role == R_TEXT) {
        ctx_put(o, 1, 4, r, e->touchdown, 1);
        ctx_put(o, 2, 4, r, sec, 1);
    }
    return 0;
}

static PyObject *out_build(spec_t *s, out_t *o) {
    PyObject *ctx = PyList_New(o->nctx), *cols = Py_None, *pos = Py_None;
    if (!ctx) return NULL;
    for (int k = 0; k < o->nctx; k++) {
        PyObject *valid = Py_None;
        Py_INCREF(valid);
        if (o->ctx_valid[k]) {
            Py_DECREF(valid);
            valid = bitmap_or_none(o->ctx_valid[k], o->n);
        }
        PyObject *t = Py_BuildValue("(iNO)", 0, valid, o->ctx_o[k]);
        if (!t) goto fail;
        PyList_SET_ITEM(ctx, k, t);
    }
    if (s->has_layout) {
        cols = PyList_New(s->nf);
        if (!cols) goto fail;
        for (int f = 0; f < s->nf; f++) {
            PyObject *c = col_finish(&o->cols[f]);
            if (!c) {
                Py_DECREF(cols);
                goto fail;
            }
            PyList_SET_ITEM(cols, f, c);
        }
    } else {
        Py_INCREF(cols);
    }
    if (o->pos_o) pos = o->pos_o;
    return Py_BuildValue("(iLNNO)", s->key, (long long)o->n, ctx, cols, pos);
fail:
    Py_DECREF(ctx);
    return NULL;
}

static PyObject *engine_batch(Engine *e, PyObject *args) {
    Py_buffer buf, offs, lens;
    long long first_rec;
    if (!PyArg_ParseTuple(args, "y*y*y*L", &buf, &offs, &lens, &first_rec)) return NULL;
    const uint8_t *b = (const uint8_t *)buf.buf;
    const int64_t *o = (const int64_t *)offs.buf, *l = (const int64_t *)lens.buf;
    int64_t n = offs.len / 8, unknown = 0;
    PyObject *result = NULL;
    out_t *outs = (out_t *)calloc((size_t)e->nspec + 1, sizeof(out_t));
    if (!outs) {
        PyErr_NoMemory();
        goto done;
    }
    if (lens.len != offs.len) {
        PyErr_SetString(PyExc_ValueError, "offsets and lengths differ");
        goto done;
    }
    for (int64_t i = 0; i < n; i++) {
        if (o[i] < 0 || l[i] < 0 || o[i] + 4 + l[i] > buf.len) {
            PyErr_SetString(PyExc_ValueError, "record runs past the buffer");
            goto done;
        }
        int s = e->keymap[b[o[i] + 2] << 8 | b[o[i] + 3]];
        if (s < 0) unknown++;
        else outs[s].n++;
    }
    for (int s = 0; s < e->nspec; s++)
        if (outs[s].n && out_init(e, &e->specs[s], &outs[s])) goto done;
    int failed = 0; /* -1 no memory, -2 sections nested past the limit */
    Py_BEGIN_ALLOW_THREADS /* the staging writer runs meanwhile */
    for (int64_t i = 0; i < n && !failed; i++) {
        int s = e->keymap[b[o[i] + 2] << 8 | b[o[i] + 3]];
        if (s < 0) continue;
        spec_t *sp = &e->specs[s];
        out_t *ot = &outs[s];
        const uint8_t *pay = b + o[i] + 4;
        int64_t r = ot->row++;
        failed = one_record(e, sp, ot, pay, l[i], first_rec + i, r);
        if (failed) break;
        if (sp->has_layout)
            failed = decode_record(&ot->rt, pay, 0, l[i], r);
        else if (ot->pos_o)
            memcpy(PyBytes_AS_STRING(ot->pos_o) + r * 8, &i, 8);
    }
    for (int s = 0; s < e->nspec && !failed; s++)
        if (outs[s].n && outs[s].rt.tail_from) rtype_fill_defaults(&outs[s].rt, outs[s].n);
    Py_END_ALLOW_THREADS
    if (failed == -2) {
        PyErr_SetString(PyExc_RuntimeError, "program sections nested past the limit");
        goto done;
    }
    if (failed) {
        PyErr_NoMemory();
        goto done;
    }
    PyObject *list = PyList_New(0);
    if (!list) goto done;
    for (int key = 0; key < 65536; key++) { /* key order, as the numpy path groups them */
        int s = e->keymap[key];
        if (s < 0 || !outs[s].n) continue;
        PyObject *item = out_build(&e->specs[s], &outs[s]);
        if (!item || PyList_Append(list, item)) {
            Py_XDECREF(item);
            Py_DECREF(list);
            goto done;
        }
        Py_DECREF(item);
    }
    result = Py_BuildValue("(LN)", (long long)unknown, list);
done:
    if (outs) {
        for (int s = 0; s < e->nspec; s++) out_free(&outs[s], e->specs[s].nf);
        free(outs);
    }
    PyBuffer_Release(&buf);
    PyBuffer_Release(&offs);
    PyBuffer_Release(&lens);
    return result;
}

/* -- state for Python -------------------------------------------------------------------- */
static PyObject *engine_part_index(Engine *e, PyObject *args) {
    Py_buffer keys;
    if (!PyArg_ParseTuple(args, "y*", &keys)) return NULL;
    int64_t n = keys.len / 8;
    const int64_t *k = (const int64_t *)keys.buf;
    PyObject *out = PyBytes_FromStringAndSize(NULL, (Py_ssize_t)(n * 8));
    if (out) {
        int64_t *p = (int64_t *)PyBytes_AS_STRING(out);
        for (int64_t i = 0; i < n; i++)
            p[i] = k[i] >= 0 && k[i] < e->part_index.n ? e->part_index.p[k[i]] : -1;
    }
    PyBuffer_Release(&keys);
    return out;
}

static PyObject *ivec_bytes(const ivec_t *v, int size) {
    PyObject *o = PyBytes_FromStringAndSize(NULL, (Py_ssize_t)(v->n * size));
    if (!o) return NULL;
    char *p = PyBytes_AS_STRING(o);
    for (int64_t i = 0; i < v->n; i++) {
        if (size == 8) {
            memcpy(p + 8 * i, &v->p[i], 8);
        } else {
            int32_t x = (int32_t)v->p[i];
            memcpy(p + 4 * i, &x, 4);
        }
    }
    return o;
}

/* Every section so far: (parent int32, depth int32, touchdown int32, begin int64,
 * end int64, name offsets int64 (n + 1), name bytes); -1 = none. */
static PyObject *engine_sections(Engine *e, PyObject *noargs) {
    if (iv_push(&e->sec_name_off, e->sec_names.len)) return PyErr_NoMemory();
    e->sec_name_off.n--; /* the closing offset, not a section */
    ivec_t offs = e->sec_name_off;
    offs.n++;
    PyObject *names = PyBytes_FromStringAndSize((const char *)e->sec_names.p,
                                                (Py_ssize_t)e->sec_names.len);
    if (!names) return NULL;
    return Py_BuildValue("(NNNNNNN)", ivec_bytes(&e->sec_parent, 4), ivec_bytes(&e->sec_depth, 4),
                         ivec_bytes(&e->sec_td, 4), ivec_bytes(&e->sec_begin, 8),
                         ivec_bytes(&e->sec_end, 8), ivec_bytes(&offs, 8), names);
}

static PyObject *engine_dictionary(Engine *e, PyObject *args) {
    int key, f;
    if (!PyArg_ParseTuple(args, "ii", &key, &f)) return NULL;
    if (key < 0 || key > 65535 || e->keymap[key] < 0 || f < 0 || f >= MAXF) {
        PyErr_SetString(PyExc_KeyError, "no such record field");
        return NULL;
    }
    return dict_export(&e->specs[e->keymap[key]].dicts[f]);
}

static PyObject *engine_dict_size(Engine *e, PyObject *args) {
    int key, f;
    if (!PyArg_ParseTuple(args, "ii", &key, &f)) return NULL;
    if (key < 0 || key > 65535 || e->keymap[key] < 0 || f < 0 || f >= MAXF) {
        PyErr_SetString(PyExc_KeyError, "no such record field");
        return NULL;
    }
    return PyLong_FromLongLong((long long)e->specs[e->keymap[key]].dicts[f].count);
}

/* (open sections, open parts, abandoned parts, PRRs without PIR, EPSs without BPS). */
static PyObject *engine_stats(Engine *e, PyObject *noargs) {
    return Py_BuildValue("(iLLLL)", e->depth, (long long)e->n_open, (long long)e->abandoned,
                         (long long)e->prr_without_pir, (long long)e->eps_without_bps);
}

static PyMethodDef engine_methods[] = {
    {"batch", (PyCFunction)engine_batch, METH_VARARGS, "Decode one batch of records."},
    {"part_index", (PyCFunction)engine_part_index, METH_VARARGS, "part_index of part keys."},
    {"sections", (PyCFunction)engine_sections, METH_NOARGS, "Every section so far."},
    {"dictionary", (PyCFunction)engine_dictionary, METH_VARARGS, "A text dictionary."},
    {"dict_size", (PyCFunction)engine_dict_size, METH_VARARGS, "Strings in a dictionary."},
    {"stats", (PyCFunction)engine_stats, METH_NOARGS, "Counters of the structure walk."},
    {NULL, NULL, 0, NULL},
};

PyTypeObject EngineType = {
    PyVarObject_HEAD_INIT(NULL, 0)
    .tp_name = "pipeline.read.stdf._scan.Engine",
    .tp_basicsize = sizeof(Engine),
    .tp_dealloc = (destructor)engine_dealloc,
    .tp_flags = Py_TPFLAGS_DEFAULT,
    .tp_doc = "Streaming STDF V4 batch decoder state.",
    .tp_methods = engine_methods,
    .tp_init = (initproc)engine_init,
    .tp_new = PyType_GenericNew,
};
