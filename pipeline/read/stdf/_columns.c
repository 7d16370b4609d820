/* Column buffers, one record's fields, default data and text dictionaries.
 *
 * The field rules are the standard's (STDF V4, "Optional fields and missing/invalid
 * data"): a field is present only while REC_LEN covers it; a C*n, B*n, D*n or array
 * whose length runs past REC_LEN is absent and ends the record. N*1 arrays pack two
 * items per byte, first in the low nibble. C*n and C*1 text is Latin-1, stored as UTF-8.
 *
 * Default data (STDF V4, PTR 15/10 and MPR 15/15): the first record of a test number
 * gives the defaults of the fields flagged F_DEFAULT; a later record takes the default
 * where its own value is missing: cut off by REC_LEN, flagged invalid in OPT_FLAG (the
 * field's `inv` bit), or, for text flagged F_EMPTY, a C*n of length 0. A field whose
 * `none` bit is set in the record's OPT_FLAG (its own, else the first record's) has no
 * value at all. A record without TEST_NUM takes no default data. The numpy path
 * (walk.py) and the reference (reference.py) follow the same rules.
 */
#include "_stdf.h"

int gb_reserve(gbuf_t *g, int64_t more) {
    if (g->len + more <= g->cap) return 0;
    int64_t cap = g->cap ? g->cap : 4096;
    while (cap < g->len + more) cap *= 2;
    uint8_t *p = (uint8_t *)realloc(g->p, (size_t)cap);
    if (!p) return -1;
    g->p = p;
    g->cap = cap;
    return 0;
}

void gb_free(gbuf_t *g) {
    free(g->p);
    g->p = NULL;
    g->len = g->cap = 0;
}

int parse_layout(const uint8_t *raw, Py_ssize_t len, lay_t *out, int *nf) {
    if (len % LAY_BYTES || len / LAY_BYTES > MAXF) return -1;
    *nf = (int)(len / LAY_BYTES);
    for (int f = 0; f < *nf; f++) {
        const uint8_t *x = raw + LAY_BYTES * f;
        lay_t L = {x[0], x[1], x[2], x[3], x[4], x[5]};
        if (L.kind < K_FIXED || L.kind > K_NIB) return -1;
        if ((L.kind == K_FIXED || L.kind == K_ARR) && (L.size < 1 || L.size > 8)) return -1;
        if ((L.kind == K_ARR || L.kind == K_NIB) && L.ci >= f) return -1;
        out[f] = L;
    }
    return 0;
}

static PyObject *zeroed(int64_t size) {
    PyObject *o = PyBytes_FromStringAndSize(NULL, (Py_ssize_t)size);
    if (o && size) memset(PyBytes_AS_STRING(o), 0, (size_t)size);
    return o;
}

int cols_init(col_t *cols, const lay_t *lay, int nf, int64_t n, int with_dict) {
    memset(cols, 0, sizeof(col_t) * (size_t)nf);
    for (int f = 0; f < nf; f++) {
        col_t *c = &cols[f];
        c->kind = lay[f].kind;
        c->size = lay[f].size;
        c->n = n;
        c->dict = with_dict && c->kind == K_CN && (lay[f].flags & F_DICT);
        c->valid_o = zeroed((n + 7) / 8);
        if (!c->valid_o) return -1;
        c->valid = (uint8_t *)PyBytes_AS_STRING(c->valid_o);
        if (c->kind == K_FIXED || c->dict) {
            c->vals_o = zeroed(n * (c->dict ? 4 : c->size));
            if (!c->vals_o) return -1;
            c->vals = (uint8_t *)PyBytes_AS_STRING(c->vals_o);
        } else {
            c->offs_o = PyBytes_FromStringAndSize(NULL, (Py_ssize_t)((n + 1) * 8));
            if (!c->offs_o) return -1;
            c->offs = (int64_t *)PyBytes_AS_STRING(c->offs_o);
            c->offs[0] = 0;
        }
    }
    return 0;
}

void cols_free(col_t *cols, int nf) {
    for (int f = 0; f < nf; f++) {
        Py_CLEAR(cols[f].valid_o);
        Py_CLEAR(cols[f].vals_o);
        Py_CLEAR(cols[f].offs_o);
        gb_free(&cols[f].data);
    }
}

/* The end offset of every row before r (they are absent: empty), before row r is written. */
static inline void catch_up(col_t *c, int64_t r) {
    int64_t cur = c->kind >= K_ARR ? c->items : c->data.len;
    while (c->filled < r) c->offs[++c->filled] = cur;
}

static inline void end_row(col_t *c, int64_t r) {
    c->offs[r + 1] = c->kind >= K_ARR ? c->items : c->data.len;
    c->filled = r + 1;
    set_bit(c->valid, r);
}

/* Latin-1 bytes as UTF-8: bytes above 0x7F become two. */
static int append_text(col_t *c, const uint8_t *p, int64_t n) {
    if (gb_reserve(&c->data, 2 * n)) return -1;
    uint8_t *o = c->data.p + c->data.len;
    for (int64_t i = 0; i < n; i++) {
        uint8_t x = p[i];
        if (x < 0x80) {
            *o++ = x;
        } else {
            *o++ = (uint8_t)(0xC0 | (x >> 6));
            *o++ = (uint8_t)(0x80 | (x & 0x3F));
        }
    }
    c->data.len = o - c->data.p;
    return 0;
}

/* The validity bitmap of n rows, or None when every row is valid (Arrow's "no nulls"). */
PyObject *bitmap_or_none(PyObject *valid_o, int64_t n) {
    const uint8_t *bits = (const uint8_t *)PyBytes_AS_STRING(valid_o);
    int64_t full = n / 8, i = 0;
    for (; i + 8 <= full; i += 8) {
        uint64_t w;
        memcpy(&w, bits + i, 8);
        if (w != UINT64_MAX) goto some_null;
    }
    for (; i < full; i++)
        if (bits[i] != 0xFF) goto some_null;
    if (n % 8 && bits[full] != (uint8_t)((1u << (n % 8)) - 1)) goto some_null;
    Py_RETURN_NONE;
some_null:
    Py_INCREF(valid_o);
    return valid_o;
}

PyObject *col_finish(col_t *c) {
    PyObject *valid = bitmap_or_none(c->valid_o, c->n), *out = NULL;
    if (c->kind == K_FIXED || c->dict) {
        out = Py_BuildValue("(iNO)", c->dict ? 2 : 0, valid, c->vals_o);
    } else {
        catch_up(c, c->n);
        PyObject *data = PyBytes_FromStringAndSize((const char *)c->data.p,
                                                   (Py_ssize_t)c->data.len);
        if (!data) {
            Py_DECREF(valid);
            return NULL;
        }
        out = Py_BuildValue("(iNON)", c->kind >= K_ARR ? 3 : 1, valid, c->offs_o, data);
    }
    return out;
}

/* -- dictionaries ---------------------------------------------------------------------- */
static uint64_t fnv(const uint8_t *p, int64_t n) {
    uint64_t h = 1469598103934665603ULL;
    for (int64_t i = 0; i < n; i++) h = (h ^ p[i]) * 1099511628211ULL;
    return h;
}

static int dict_rehash(dict_t *d, int64_t tsize) {
    int32_t *t = (int32_t *)malloc(sizeof(int32_t) * (size_t)tsize);
    if (!t) return -1;
    memset(t, 0xFF, sizeof(int32_t) * (size_t)tsize);
    for (int64_t i = 0; i < d->count; i++) {
        uint64_t h = fnv(d->raw.p + d->off[i], d->off[i + 1] - d->off[i]) & (uint64_t)(tsize - 1);
        while (t[h] >= 0) h = (h + 1) & (uint64_t)(tsize - 1);
        t[h] = (int32_t)i;
    }
    free(d->table);
    d->table = t;
    d->tsize = tsize;
    return 0;
}

/* Index of the string p[0..n) in d, added when new; -1 when memory runs out. */
static int64_t dict_intern(dict_t *d, const uint8_t *p, int64_t n) {
    if (!d->table && dict_rehash(d, 64)) return -1;
    uint64_t mask = (uint64_t)(d->tsize - 1), h = fnv(p, n) & mask;
    for (;;) {
        int32_t i = d->table[h];
        if (i < 0) break;
        int64_t a = d->off[i], len = d->off[i + 1] - a;
        if (len == n && memcmp(d->raw.p + a, p, (size_t)n) == 0) return i;
        h = (h + 1) & mask;
    }
    if (d->count + 2 > d->cap) {
        int64_t cap = d->cap ? 2 * d->cap : 16;
        int64_t *off = (int64_t *)realloc(d->off, sizeof(int64_t) * (size_t)cap);
        if (!off) return -1;
        d->off = off;
        d->cap = cap;
        if (d->count == 0) d->off[0] = 0;
    }
    if (gb_reserve(&d->raw, n)) return -1;
    memcpy(d->raw.p + d->raw.len, p, (size_t)n);
    d->raw.len += n;
    d->off[d->count + 1] = d->raw.len;
    d->table[h] = (int32_t)d->count;
    d->count++;
    if (2 * d->count > d->tsize && dict_rehash(d, 2 * d->tsize)) return -1;
    return d->count - 1;
}

void dict_free(dict_t *d) {
    gb_free(&d->raw);
    free(d->off);
    free(d->table);
    memset(d, 0, sizeof(*d));
}

/* (count, offsets, UTF-8 data) of every string interned so far. */
PyObject *dict_export(dict_t *d) {
    col_t c;
    memset(&c, 0, sizeof(c));
    c.kind = K_CN;
    c.n = d->count;
    c.offs_o = PyBytes_FromStringAndSize(NULL, (Py_ssize_t)((d->count + 1) * 8));
    if (!c.offs_o) return NULL;
    c.offs = (int64_t *)PyBytes_AS_STRING(c.offs_o);
    c.offs[0] = 0;
    for (int64_t i = 0; i < d->count; i++) {
        if (append_text(&c, d->raw.p + d->off[i], d->off[i + 1] - d->off[i])) {
            Py_DECREF(c.offs_o);
            gb_free(&c.data);
            return PyErr_NoMemory();
        }
        c.offs[i + 1] = c.data.len;
    }
    PyObject *data = PyBytes_FromStringAndSize((const char *)c.data.p, (Py_ssize_t)c.data.len);
    gb_free(&c.data);
    if (!data) {
        Py_DECREF(c.offs_o);
        return NULL;
    }
    return Py_BuildValue("(LNN)", (long long)d->count, c.offs_o, data);
}

/* -- default data ---------------------------------------------------------------------- */
static int dflt_rehash(dflt_t *d, int64_t tsize) {
    int64_t *keys = (int64_t *)malloc(sizeof(int64_t) * (size_t)tsize);
    int64_t *slots = (int64_t *)malloc(sizeof(int64_t) * (size_t)tsize);
    if (!keys || !slots) {
        free(keys);
        free(slots);
        return -1;
    }
    memset(keys, 0xFF, sizeof(int64_t) * (size_t)tsize);
    for (int64_t i = 0; i < d->tsize; i++) {
        if (d->keys[i] < 0) continue;
        uint64_t h = ((uint64_t)d->keys[i] * 0x9E3779B97F4A7C15ULL) & (uint64_t)(tsize - 1);
        while (keys[h] >= 0) h = (h + 1) & (uint64_t)(tsize - 1);
        keys[h] = d->keys[i];
        slots[h] = d->slots[i];
    }
    free(d->keys);
    free(d->slots);
    d->keys = keys;
    d->slots = slots;
    d->tsize = tsize;
    return 0;
}

/* The slot of a test number; *is_new says this record is its first. -1: no memory. */
static int64_t dflt_lookup(dflt_t *d, uint64_t key, int *is_new) {
    if (!d->keys && dflt_rehash(d, 256)) return -1;
    uint64_t mask = (uint64_t)(d->tsize - 1), h = (key * 0x9E3779B97F4A7C15ULL) & mask;
    while (d->keys[h] >= 0) {
        if ((uint64_t)d->keys[h] == key) {
            *is_new = 0;
            return d->slots[h];
        }
        h = (h + 1) & mask;
    }
    if (d->count == d->cap) {
        int64_t cap = d->cap ? 2 * d->cap : 64;
        dval_t *vals = (dval_t *)realloc(d->vals, sizeof(dval_t) * (size_t)(cap * d->nf));
        if (!vals) return -1;
        d->vals = vals;
        uint8_t *ok = (uint8_t *)realloc(d->opt_ok, (size_t)cap);
        if (!ok) return -1;
        d->opt_ok = ok;
        uint8_t *opt = (uint8_t *)realloc(d->opt, (size_t)cap);
        if (!opt) return -1;
        d->opt = opt;
        d->cap = cap;
    }
    int64_t slot = d->count++;
    memset(&d->vals[slot * d->nf], 0, sizeof(dval_t) * (size_t)d->nf);
    d->opt_ok[slot] = 0;
    d->opt[slot] = 0;
    d->keys[h] = (int64_t)key;
    d->slots[h] = slot;
    *is_new = 1;
    if (2 * d->count > d->tsize && dflt_rehash(d, 2 * d->tsize)) return -1;
    return slot;
}

void dflt_free(dflt_t *d) {
    free(d->keys);
    free(d->slots);
    free(d->vals);
    free(d->opt_ok);
    free(d->opt);
    gb_free(&d->blob);
    memset(d, 0, sizeof(*d));
}

/* -- one record ---------------------------------------------------------------------- */
static int put_items(gbuf_t *g, const lay_t *L, const uint8_t *p, int64_t items, int big) {
    int64_t bytes = L->kind == K_NIB ? items : items * L->size;
    if (gb_reserve(g, bytes)) return -1;
    uint8_t *o = g->p + g->len;
    for (int64_t i = 0; i < items; i++) {
        if (L->kind == K_NIB)
            o[i] = (p[i / 2] >> (4 * (i % 2))) & 0x0F;
        else
            put(o + i * L->size, p + i * L->size, L->size, big);
    }
    g->len += bytes;
    return 0;
}

static int write_own(rtype_t *rt, int f, const uint8_t *p, int64_t need, int64_t items,
                     int64_t dict_index, int64_t r) {
    const lay_t *L = &rt->lay[f];
    col_t *c = &rt->cols[f];
    if (c->kind == K_FIXED) {
        put(c->vals + r * c->size, p, c->size, rt->big);
    } else if (c->dict) {
        ((int32_t *)c->vals)[r] = (int32_t)dict_index;
    } else {
        catch_up(c, r);
        if (c->kind == K_C1 || c->kind == K_CN) {
            if (append_text(c, p, need)) return -1;
        } else if (c->kind == K_ARR || c->kind == K_NIB) {
            if (put_items(&c->data, L, p, items, rt->big)) return -1;
            c->items += items;
        } else {
            if (gb_reserve(&c->data, need)) return -1;
            memcpy(c->data.p + c->data.len, p, (size_t)need);
            c->data.len += need;
        }
        end_row(c, r);
        return 0;
    }
    set_bit(c->valid, r);
    return 0;
}

static int write_default(rtype_t *rt, int f, const dval_t *v, int64_t r) {
    const lay_t *L = &rt->lay[f];
    col_t *c = &rt->cols[f];
    if (c->kind == K_FIXED) {
        put(c->vals + r * c->size, (const uint8_t *)&v->v, c->size, 0);
    } else if (c->dict) {
        ((int32_t *)c->vals)[r] = (int32_t)v->v;
    } else {
        int64_t bytes = L->kind == K_NIB ? v->items : v->items * L->size;
        catch_up(c, r);
        if (gb_reserve(&c->data, bytes)) return -1;
        memcpy(c->data.p + c->data.len, rt->d->blob.p + v->off, (size_t)bytes);
        c->data.len += bytes;
        c->items += v->items;
        end_row(c, r);
        return 0;
    }
    set_bit(c->valid, r);
    return 0;
}

static int store_default(rtype_t *rt, int f, int64_t slot, const uint8_t *p, int64_t items,
                         int64_t dict_index) {
    const lay_t *L = &rt->lay[f];
    dval_t *v = &rt->d->vals[slot * rt->nf + f];
    v->valid = 1;
    if (L->kind == K_FIXED) {
        v->v = 0;
        put((uint8_t *)&v->v, p, L->size, rt->big);
    } else if (rt->cols[f].dict) {
        v->v = dict_index;
    } else {
        v->off = rt->d->blob.len;
        v->items = items;
        if (put_items(&rt->d->blob, L, p, items, rt->big)) return -1;
    }
    return 0;
}

/* Fields the default data can fill: fixed values, dictionary text, arrays. */
static inline int defaultable(const rtype_t *rt, int f) {
    const col_t *c = &rt->cols[f];
    return (rt->lay[f].flags & F_DEFAULT) &&
           (c->kind == K_FIXED || c->dict || c->kind == K_ARR || c->kind == K_NIB);
}

/* Fixed and dictionary columns take their defaults after the record pass; arrays append
 * to their data in row order, so they take theirs inline. */
static inline int deferred(const rtype_t *rt, int f) {
    return rt->cols[f].kind == K_FIXED || rt->cols[f].dict;
}

void rtype_prepare(rtype_t *rt) {
    memset(rt->is_count, 0, sizeof(rt->is_count));
    for (int f = 0; f < rt->nf; f++)
        if (rt->lay[f].kind == K_ARR || rt->lay[f].kind == K_NIB) rt->is_count[rt->lay[f].ci] = 1;
    rt->prefix_n = 0;
    rt->prefix_bytes = 0;
    while (rt->prefix_n < rt->nf && rt->lay[rt->prefix_n].kind == K_FIXED &&
           !(rt->lay[rt->prefix_n].flags & F_DEFAULT) && rt->prefix_n != rt->opt_idx) {
        rt->prefix_off[rt->prefix_n] = rt->prefix_bytes;
        rt->prefix_bytes += rt->lay[rt->prefix_n++].size;
    }
    /* Almost every record holds the leading fields: they start valid, and a record cut
     * short of them clears its bits (decode_record). */
    for (int f = 0; f < rt->prefix_n; f++) {
        col_t *c = &rt->cols[f];
        memset(c->valid, 0xFF, (size_t)(c->n / 8));
        if (c->n % 8) c->valid[c->n / 8] = (uint8_t)((1u << (c->n % 8)) - 1);
    }
    rt->n_dfl = 0;
    rt->all_deferred = 1;
    for (int f = 0; f < rt->nf; f++) {
        if (!defaultable(rt, f)) continue;
        rt->dfl_deferred[rt->n_dfl] = (uint8_t)deferred(rt, f);
        rt->all_deferred &= deferred(rt, f);
        rt->dfl[rt->n_dfl++] = (uint8_t)f;
    }
}

static inline int64_t load(const uint8_t *p, int size, int big) {
    switch (size) { /* the sizes of count fields and TEST_NUM: U*1, U*2, U*4 */
    case 1: return p[0];
    case 2: return big ? (p[0] << 8 | p[1]) : (p[1] << 8 | p[0]);
    case 4: {
        uint32_t v;
        memcpy(&v, p, 4);
        return big ? __builtin_bswap32(v) : v;
    }
    default: return (int64_t)rd(p, size, big);
    }
}

/* One present or absent field of a record that may take default data. */
static int field_out(rtype_t *rt, int f, int here, const uint8_t *p, int64_t need,
                     int64_t items, int64_t slot, int is_new, int opt, int opt_here, int64_t r) {
    const lay_t *L = &rt->lay[f];
    dflt_t *d = rt->d;
    int64_t dict_index = -1;
    if (here && rt->cols[f].dict) {
        dict_index = dict_intern(&rt->dicts[f], p, need);
        if (dict_index < 0) return -1;
    }
    int out = here; /* 0 null, 1 own value, 2 the default */
    if (slot >= 0 && defaultable(rt, f)) {
        int inv = L->inv != NO_BIT && ((opt >> L->inv) & 1);
        if (is_new) {
            out = here && !inv;
            if (out && store_default(rt, f, slot, p, items, dict_index)) return -1;
        } else {
            int missing = !here || inv || ((L->flags & F_EMPTY) && need == 0);
            out = !missing ? 1 : d->vals[slot * rt->nf + f].valid ? 2 : 0;
        }
        if (L->none != NO_BIT) {
            int eff = opt_here ? opt : d->opt_ok[slot] ? d->opt[slot] : 0;
            if ((eff >> L->none) & 1) out = 0;
        }
    }
    if (out == 1) return write_own(rt, f, p, need, items, dict_index, r);
    if (out == 2) return write_default(rt, f, &d->vals[slot * rt->nf + f], r);
    return 0;
}

/* Decode the record b[pos..end) into row r of rt's columns. -1: no memory.
 * Three stretches: the leading fixed fields (one bounds check), then field by field
 * while REC_LEN covers them, then, once a field is cut off, only the fields the
 * default data fills (every later field is absent: the standard's trailing-field rule). */
int decode_record(rtype_t *rt, const uint8_t *b, int64_t pos, int64_t end, int64_t r) {
    int64_t counts[MAXF];
    int big = rt->big, is_new = 0, opt = 0, opt_here = 0, f = 0;
    int64_t slot = -1;
    dflt_t *d = rt->d;
    if (end - pos >= rt->prefix_bytes) { /* the leading fixed fields, all present */
        for (; f < rt->prefix_n; f++) {
            col_t *c = &rt->cols[f];
            put(c->vals + r * c->size, b + pos + rt->prefix_off[f], c->size, big);
        }
        for (int g = 0; g < rt->prefix_n; g++) {
            if (!rt->is_count[g] && (g != rt->test_idx || !d)) continue;
            int64_t v = load(b + pos + rt->prefix_off[g], rt->lay[g].size, big);
            counts[g] = v;
            if (g == rt->test_idx && d) {
                slot = dflt_lookup(d, (uint64_t)v, &is_new);
                if (slot < 0) return -1;
            }
        }
        pos += rt->prefix_bytes;
    }
    for (; f < rt->nf; f++) {
        const lay_t *L = &rt->lay[f];
        const uint8_t *p = NULL;
        int64_t need = 0, items = 0, skip = 0;
        switch (L->kind) {
        case K_FIXED: case K_C1:
            need = L->kind == K_C1 ? 1 : L->size;
            break;
        case K_CN: case K_BN:
            skip = 1;
            need = pos + 1 <= end ? b[pos] : 0;
            break;
        case K_DN:
            skip = 2;
            need = pos + 2 <= end ? ((int64_t)rd(b + pos, 2, big) + 7) / 8 : 0;
            break;
        default: /* K_ARR, K_NIB: the count field comes first (parse_layout) */
            items = counts[L->ci];
            need = L->kind == K_NIB ? (items + 1) / 2 : items * L->size;
        }
        if (pos + skip + need > end) break; /* cut off here: this and every later field */
        p = b + pos + skip;
        pos += skip + need;
        counts[f] = rt->is_count[f] ? load(p, L->size, big) : 0;
        if (f == rt->test_idx && d) {
            slot = dflt_lookup(d, (uint64_t)load(p, L->size, big), &is_new);
            if (slot < 0) return -1;
        }
        if (f == rt->opt_idx) {
            opt = p[0];
            opt_here = 1;
            if (is_new) {
                d->opt_ok[slot] = 1;
                d->opt[slot] = (uint8_t)opt;
            }
        }
        if (slot < 0 && !rt->cols[f].dict) { /* no default data: the value as written */
            if (write_own(rt, f, p, need, items, -1, r)) return -1;
        } else if (field_out(rt, f, 1, p, need, items, slot, is_new, opt, opt_here, r)) {
            return -1;
        }
    }
    for (int g = f; g < rt->prefix_n; g++) clear_bit(rt->cols[g].valid, r); /* cut short */
    if (rt->tail_from) rt->tail_from[r] = NO_BIT;
    if (slot < 0 || is_new) return 0; /* absent fields stay null (a new slot keeps none) */
    if (rt->tail_from) {
        rt->tail_from[r] = (uint8_t)f;
        rt->tail_slot[r] = slot;
        rt->tail_opt[r] = (uint8_t)(opt_here ? opt : d->opt_ok[slot] ? d->opt[slot] : 0);
        if (rt->all_deferred) return 0;
    }
    for (int k = 0; k < rt->n_dfl; k++) {
        int g = rt->dfl[k];
        if (g < f || (rt->tail_from && rt->dfl_deferred[k])) continue;
        if (field_out(rt, g, 0, NULL, 0, 0, slot, 0, opt, opt_here, r)) return -1;
    }
    return 0;
}

/* The defaults of the cut-off fields decode_record left for later, one column at a
 * time: the same rule as field_out for a field that is absent from a later record. */
#define FILL_LOOP(T)                                                                    \
    do {                                                                                \
        T *out = (T *)c->vals;                                                          \
        uint8_t bits = 0; /* this byte's validity, stored once per 8 rows */            \
        for (int64_t r = 0; r < n; r++) {                                               \
            if (rt->tail_from[r] <= g) {                                                \
                const dval_t *v = &d->vals[rt->tail_slot[r] * rt->nf + g];              \
                if (v->valid && !((rt->tail_opt[r] >> none) & 1)) {                     \
                    T x;                                                                \
                    memcpy(&x, &v->v, sizeof(T)); /* native already */                 \
                    out[r] = x;                                                         \
                    bits |= (uint8_t)(1u << (r & 7));                                   \
                }                                                                       \
            }                                                                           \
            if ((r & 7) == 7 || r == n - 1) {                                           \
                c->valid[r >> 3] |= bits;                                               \
                bits = 0;                                                               \
            }                                                                           \
        }                                                                               \
    } while (0)

/* The defaults of the cut-off fields decode_record left for later, one column at a
 * time: the same rule as field_out for a field that is absent from a later record. */
void rtype_fill_defaults(rtype_t *rt, int64_t n) {
    const dflt_t *d = rt->d;
    for (int k = 0; k < rt->n_dfl; k++) {
        int g = rt->dfl[k];
        if (!deferred(rt, g)) continue;
        col_t *c = &rt->cols[g];
        /* bit 8 of a byte is never set: NO_BIT (255) shifts every flag out */
        int none = rt->lay[g].none == NO_BIT ? 8 : rt->lay[g].none;
        switch (c->dict ? 4 : c->size) {
        case 1: FILL_LOOP(uint8_t); break;
        case 2: FILL_LOOP(uint16_t); break;
        case 4: FILL_LOOP(uint32_t); break;
        default: FILL_LOOP(uint64_t); break;
        }
    }
}
