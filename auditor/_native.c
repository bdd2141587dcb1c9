/*
 * Compiled per-event loops of the audit (optional accelerator).
 *
 * Each function here carries out, event by event, the steps of a NumPy routine
 * that stays in the package as the reference and the fallback:
 *
 *   curvature  <- auditor.geometry.curvature.curvature_from_rows_numpy
 *   gscreen    <- the finiteness and signature checks of geometry.points
 *   eulerian   <- auditor.frames.tetrads.eulerian
 *   frame      <- conditions.stress.frame_stress / frame_scale, crew.tidal
 *   margins    <- the NEC sphere, WEC/SEC balls of auditor.conditions.margins
 *   dec        <- auditor.conditions.margins._dec_block (the DEC search)
 *   he_screen  <- the clear cases of auditor.conditions.hawking_ellis
 *   sampled    <- auditor.conditions.sampled.sampled_margins
 *   label      <- scipy.ndimage.label (face connectivity)
 *   exact_bins <- the binning of auditor.sums.ExactSum
 *
 * The algorithms, their sources and their accuracy are documented in those
 * modules; the tests compare both implementations.  Everything is IEEE
 * double arithmetic without fast-math, and every event is computed on its
 * own, so results do not depend on how events are batched.
 *
 * Arrays arrive as C-contiguous float64 (int64 for index tables) buffers;
 * the Python wrappers in auditor/native.py check shapes and types, and each
 * function here checks buffer sizes again before touching memory.
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <complex.h>
#include <float.h>
#include <math.h>
#include <string.h>

#define EPS 2.220446049250313e-16

/* WIDE: a function whose loops vectorise is also compiled for AVX2, chosen
 * at load time where the processor has it (function multi-versioning of GCC
 * and Clang through glibc's indirect functions on x86-64). Without FMA contraction
 * (-ffp-contract=off; AVX2 does not imply FMA) both versions perform the same
 * IEEE operations in the same order: identical results, wider registers. */
#if defined(__x86_64__) && defined(__ELF__) && defined(__GLIBC__) && defined(__has_attribute)
#if __has_attribute(target_clones)
#define WIDE __attribute__((target_clones("avx2", "default")))
#endif
#endif
#ifndef WIDE
#define WIDE
#endif
/* For loops whose selects must become blends: with trapping math (the
 * default) GCC keeps a conditional expression over floating-point operands a
 * branch, and the loop scalar. The values computed are the same; only the
 * floating-point exception flags, which nothing here reads, may differ. */
#if defined(__GNUC__) && !defined(__clang__)
#define NOTRAP __attribute__((optimize("no-trapping-math")))
#else
#define NOTRAP
#endif

/* ------------------------------------------------------------ buffers */
typedef struct {
    Py_buffer view[32];
    int n;
} Buffers;

static void release(Buffers *b)
{
    for (int i = 0; i < b->n; i++)
        PyBuffer_Release(&b->view[i]);
    b->n = 0;
}

/* Get buffer `obj` (writable if asked) holding at least `count` items of
 * `itemsize` bytes; returns its data pointer or NULL with an exception set. */
static void *get(Buffers *b, PyObject *obj, Py_ssize_t count, Py_ssize_t itemsize,
                 int writable, const char *name)
{
    if (b->n >= 32) { PyErr_SetString(PyExc_ValueError, "too many buffers"); return NULL; }
    Py_buffer *v = &b->view[b->n];
    int flags = PyBUF_C_CONTIGUOUS | (writable ? PyBUF_WRITABLE : 0);
    if (PyObject_GetBuffer(obj, v, flags) < 0)
        return NULL;
    b->n++;
    if (v->len < count * itemsize) {
        PyErr_Format(PyExc_ValueError, "%s: buffer too small", name);
        return NULL;
    }
    return v->buf;
}

#define GETD(var, obj, count, w) \
    double *var = (double *)get(&bufs, obj, (count), 8, w, #var); \
    if (!var) goto fail;
#define GETI(var, obj, count) \
    const long long *var = (const long long *)get(&bufs, obj, (count), 8, 0, #var); \
    if (!var) goto fail;

/* ------------------------------------------------------------ small linear algebra */

/* Inverse of a 4x4 matrix by LU with partial pivoting; returns 0 if singular. */
static int inv4(const double *a, double *out)
{
    double m[4][8];
    for (int i = 0; i < 4; i++)
        for (int j = 0; j < 4; j++) {
            m[i][j] = a[4 * i + j];
            m[i][j + 4] = (i == j) ? 1.0 : 0.0;
        }
    for (int c = 0; c < 4; c++) {
        int p = c;
        double best = fabs(m[c][c]);
        for (int r = c + 1; r < 4; r++)
            if (fabs(m[r][c]) > best) { best = fabs(m[r][c]); p = r; }
        if (!(best > 0.0))
            return 0;
        if (p != c)
            for (int j = 0; j < 8; j++) { double t = m[c][j]; m[c][j] = m[p][j]; m[p][j] = t; }
        for (int r = c + 1; r < 4; r++) {
            double f = m[r][c] / m[c][c];
            if (f != 0.0)
                for (int j = c; j < 8; j++) m[r][j] -= f * m[c][j];
        }
    }
    for (int c = 3; c >= 0; c--) {
        for (int j = 4; j < 8; j++) {
            double s = m[c][j];
            for (int k = c + 1; k < 4; k++) s -= m[c][k] * m[k][j];
            m[c][j] = s / m[c][c];
        }
    }
    for (int i = 0; i < 4; i++)
        for (int j = 0; j < 4; j++) out[4 * i + j] = m[i][j + 4];
    return 1;
}

/* Eigen-decomposition of a symmetric n x n matrix (n <= 4) by the cyclic
 * Jacobi method (Golub & Van Loan, Matrix Computations, 4th ed. §8.5 — from
 * memory): accurate to a few ulps of the norm. `a` is overwritten; eigenvalues
 * ascending in w, eigenvectors in the columns of v (row-major n x n) unless v
 * is NULL. */
static void jacobi(double *a, int n, double *w, double *v)
{
    if (v)
        for (int i = 0; i < n; i++)
            for (int j = 0; j < n; j++) v[n * i + j] = (i == j) ? 1.0 : 0.0;
    for (int sweep = 0; sweep < 60; sweep++) {
        double off = 0.0, diag = 0.0;
        for (int i = 0; i < n; i++) {
            diag += a[n * i + i] * a[n * i + i];
            for (int j = i + 1; j < n; j++) off += a[n * i + j] * a[n * i + j];
        }
        if (off == 0.0 || off <= 1e-36 * diag)
            break;
        for (int p = 0; p < n - 1; p++)
            for (int q = p + 1; q < n; q++) {
                double apq = a[n * p + q];
                if (apq == 0.0)
                    continue;
                double app = a[n * p + p], aqq = a[n * q + q];
                double theta = (aqq - app) / (2.0 * apq);
                double t = (theta >= 0 ? 1.0 : -1.0) / (fabs(theta) + sqrt(theta * theta + 1.0));
                if (!isfinite(theta)) t = 0.5 / theta;   /* huge theta: t ~ 1/(2 theta) */
                double c = 1.0 / sqrt(t * t + 1.0), s = t * c;
                for (int k = 0; k < n; k++) {            /* A <- A J */
                    double akp = a[n * k + p], akq = a[n * k + q];
                    a[n * k + p] = c * akp - s * akq;
                    a[n * k + q] = s * akp + c * akq;
                }
                for (int k = 0; k < n; k++) {            /* A <- J^T A */
                    double apk = a[n * p + k], aqk = a[n * q + k];
                    a[n * p + k] = c * apk - s * aqk;
                    a[n * q + k] = s * apk + c * aqk;
                }
                a[n * p + q] = a[n * q + p] = 0.0;
                for (int k = 0; v && k < n; k++) {       /* V <- V J */
                    double vkp = v[n * k + p], vkq = v[n * k + q];
                    v[n * k + p] = c * vkp - s * vkq;
                    v[n * k + q] = s * vkp + c * vkq;
                }
            }
    }
    for (int i = 0; i < n; i++) w[i] = a[n * i + i];
    for (int i = 1; i < n; i++) {                        /* insertion sort, columns along */
        int j = i;
        while (j > 0 && w[j - 1] > w[j]) {
            double t = w[j]; w[j] = w[j - 1]; w[j - 1] = t;
            for (int k = 0; v && k < n; k++) {
                double u = v[n * k + j]; v[n * k + j] = v[n * k + j - 1]; v[n * k + j - 1] = u;
            }
            j--;
        }
    }
}

/* jacobi(a, 3, w, v) for JB matrices at once, structure-of-arrays (a[i][j]:
 * entry i of matrix j), so that the divisions and square roots of different
 * matrices overlap in wide registers. Each matrix goes through exactly the
 * operations jacobi() would apply to it alone, in the same order: a matrix
 * stops at the sweep where jacobi() would stop, and a rotation jacobi() skips
 * (a_pq = 0) leaves its entries as they were (selected, not multiplied by
 * c = 1, s = 0, which could flip the sign of a zero). v may be NULL. */
enum { JB = 16 };
/* (x, y) <- (c x - s y, s x + c y) in the lanes where rot is set (c, sn, rot:
 * arrays of the enclosing scope) */
#define ROTATE_LANES(X, Y)                                                      \
    for (int j = 0; j < JB; j++) {                                              \
        double xo = (X)[j], yo = (Y)[j];                                        \
        double xn = c[j] * xo - sn[j] * yo, yn = sn[j] * xo + c[j] * yo;         \
        (X)[j] = rot[j] != 0.0 ? xn : xo;                                       \
        (Y)[j] = rot[j] != 0.0 ? yn : yo;                                       \
    }
WIDE NOTRAP static void jacobi3_block(double a[9][JB], double w[3][JB], double v[9][JB])
{
    double live[JB];                 /* 1.0 while the matrix is being rotated, else 0.0 */
    if (v)
        for (int i = 0; i < 9; i++)
            for (int j = 0; j < JB; j++) v[i][j] = (i % 4 == 0) ? 1.0 : 0.0;
    for (int j = 0; j < JB; j++) live[j] = 1.0;
    for (int sweep = 0; sweep < 60; sweep++) {
        double any = 0.0;
        for (int j = 0; j < JB; j++) {
            double diag = a[0][j] * a[0][j], off = a[1][j] * a[1][j];
            off += a[2][j] * a[2][j];
            diag += a[4][j] * a[4][j];
            off += a[5][j] * a[5][j];
            diag += a[8][j] * a[8][j];
            /* branch-free (and so vectorised): (off == 0.0 || off <= 1e-36 diag) */
            live[j] = (off == 0.0) | (off <= 1e-36 * diag) ? 0.0 : live[j];
            any += live[j];
        }
        if (any == 0.0)
            break;
        for (int p = 0; p < 2; p++)
            for (int q = p + 1; q < 3; q++) {
                double c[JB], sn[JB];
                double rot[JB];
                for (int j = 0; j < JB; j++) {
                    double apq = a[3 * p + q][j], app = a[4 * p][j], aqq = a[4 * q][j];
                    rot[j] = apq != 0.0 ? live[j] : 0.0;
                    double den = apq != 0.0 ? 2.0 * apq : 1.0;
                    double theta = (aqq - app) / den;
                    double t = (theta >= 0 ? 1.0 : -1.0) / (fabs(theta) + sqrt(theta * theta + 1.0));
                    t = fabs(theta) <= DBL_MAX ? t : 0.5 / theta;   /* huge theta */
                    c[j] = 1.0 / sqrt(t * t + 1.0);
                    sn[j] = t * c[j];
                }
                for (int k = 0; k < 3; k++)                  /* A <- A J */
                    ROTATE_LANES(a[3 * k + p], a[3 * k + q]);
                for (int k = 0; k < 3; k++)                  /* A <- J^T A */
                    ROTATE_LANES(a[3 * p + k], a[3 * q + k]);
                for (int j = 0; j < JB; j++) {
                    a[3 * p + q][j] = rot[j] != 0.0 ? 0.0 : a[3 * p + q][j];
                    a[3 * q + p][j] = rot[j] != 0.0 ? 0.0 : a[3 * q + p][j];
                }
                if (v)
                    for (int k = 0; k < 3; k++)              /* V <- V J */
                        ROTATE_LANES(v[3 * k + p], v[3 * k + q]);
            }
    }
    for (int j = 0; j < JB; j++) {
        double ww[3] = {a[0][j], a[4][j], a[8][j]};
        for (int i = 1; i < 3; i++) {                    /* insertion sort, columns along */
            int m = i;
            while (m > 0 && ww[m - 1] > ww[m]) {
                double t = ww[m]; ww[m] = ww[m - 1]; ww[m - 1] = t;
                for (int k = 0; v && k < 3; k++) {
                    double u = v[3 * k + m][j]; v[3 * k + m][j] = v[3 * k + m - 1][j];
                    v[3 * k + m - 1][j] = u;
                }
                m--;
            }
        }
        for (int i = 0; i < 3; i++) w[i][j] = ww[i];
    }
}

/* ------------------------------------------------------------ curvature */
/* curvature(rows (150,N), extra (N,), tables..., outputs...)
 * tables: gidx (16), g1,g2,g3 (4*10 each), trows (4*21), q1,q2 (21),
 *         ric_rows (10*16), ric_ginv (10*16), ric_sign (10*16, float),
 *         pidx (16)
 * outputs: g, ginv, ricci, einstein (N*16), up (40,N), r21, s21 (21,N),
 *          rscalar (N). The Kretschmann scalar is formed in NumPy when asked
 *          for (auditor/geometry/curvature.py): the audit does not use it.
 * crow (150): the value of each row that holds one number at every event
 *          (taken from here instead of read), NaN for rows to read. */
WIDE static PyObject *py_curvature(PyObject *self, PyObject *args)
{
    PyObject *o[22];
    Py_ssize_t n;
    Buffers bufs = {.n = 0};
    if (!PyArg_ParseTuple(args, "nOOOOOOOOOOOOOOOOOOOOOO", &n,
                          &o[0], &o[1], &o[2], &o[3], &o[4], &o[5], &o[6], &o[7], &o[8],
                          &o[9], &o[10], &o[11], &o[12], &o[13], &o[14], &o[15], &o[16],
                          &o[17], &o[18], &o[19], &o[20], &o[21]))
        return NULL;
    if (n < 0) { PyErr_SetString(PyExc_ValueError, "n < 0"); return NULL; }
    GETD(rows, o[0], 150 * n, 0);
    GETD(crow, o[21], 150, 0);
    GETD(extra, o[1], n, 0);
    GETI(gidx, o[2], 16);
    GETI(g1, o[3], 40);
    GETI(g2, o[4], 40);
    GETI(g3, o[5], 40);
    GETI(trows, o[6], 84);
    GETI(q1, o[7], 21);
    GETI(q2, o[8], 21);
    GETI(ric_rows, o[9], 160);
    GETI(ric_ginv, o[10], 160);
    GETD(ric_sign, o[11], 160, 0);
    GETI(pidx, o[12], 16);
    GETD(g_out, o[13], 16 * n, 1);
    GETD(gi_out, o[14], 16 * n, 1);
    GETD(ric_out, o[15], 16 * n, 1);
    GETD(ein_out, o[16], 16 * n, 1);
    GETD(up_out, o[17], 40 * n, 1);
    GETD(r21_out, o[18], 21 * n, 1);
    GETD(s21_out, o[19], 21 * n, 1);
    GETD(rs_out, o[20], n, 1);
    /* bounds of table entries */
    for (int i = 0; i < 16; i++) if (gidx[i] < 0 || gidx[i] >= 150 || pidx[i] < 0 || pidx[i] >= 10) goto bad;
    for (int i = 0; i < 40; i++) if (g1[i] < 0 || g1[i] >= 150 || g2[i] < 0 || g2[i] >= 150 || g3[i] < 0 || g3[i] >= 150) goto bad;
    for (int i = 0; i < 84; i++) if (trows[i] < 0 || trows[i] >= 150) goto bad;
    for (int i = 0; i < 21; i++) if (q1[i] < 0 || q1[i] >= 100 || q2[i] < 0 || q2[i] >= 100) goto bad;
    for (int i = 0; i < 160; i++) if (ric_rows[i] < 0 || ric_rows[i] > 21 || ric_ginv[i] < 0 || ric_ginv[i] >= 16) goto bad;

    Py_BEGIN_ALLOW_THREADS
    /* Events in blocks of CB, stored structure-of-arrays (x[component][event]):
     * the block's rows are read and its outputs written row by row, and every
     * step but the pivoted inverse runs across the CB events of the block in
     * its innermost loop (independent operations the compiler vectorises). The
     * arithmetic of each event, and the order of its sums, is the same as in a
     * loop over single events. With 16 events the block's arrays take about
     * 38 KiB instead of 76, about the size of a first-level data cache: 6-10 %
     * faster than 32 on the development machine. */
    enum { CB = 16 };
    double in[150][CB], gi[16][CB], low[40][CB], up[40][CB], r22[22][CB], ric[10][CB];
    double o_s21[21][CB], acc[CB], R[CB];
    for (Py_ssize_t e0 = 0; e0 < n; e0 += CB) {
        Py_ssize_t nb = n - e0 < CB ? n - e0 : CB;
        for (int r = 0; r < 150; r++) {
            if (crow[r] == crow[r]) {            /* a constant row: its value, not read */
                for (int j = 0; j < CB; j++) in[r][j] = crow[r];
            } else if (nb == CB) {               /* a whole block: a fixed-size copy */
                const double *src = rows + (Py_ssize_t)r * n + e0;
                for (int j = 0; j < CB; j++) in[r][j] = src[j];
            } else {
                memcpy(in[r], rows + (Py_ssize_t)r * n + e0, nb * sizeof(double));
                for (Py_ssize_t j = nb; j < CB; j++) in[r][j] = in[r][0];   /* padding */
            }
        }
        for (int j = 0; j < CB; j++) {           /* pivoted inverse, event by event */
            double g[16], inv[16];
            for (int i = 0; i < 16; i++) g[i] = in[gidx[i]][j];
            if (!inv4(g, inv))
                for (int i = 0; i < 16; i++) inv[i] = NAN;
            for (int x = 0; x < 4; x++)
                for (int y = 0; y < 4; y++)
                    gi[4 * x + y][j] = 0.5 * (inv[4 * x + y] + inv[4 * y + x]);
        }
        for (int i = 0; i < 40; i++) {
            const double *p1 = in[g1[i]], *p2 = in[g2[i]], *p3 = in[g3[i]];
            for (int j = 0; j < CB; j++) low[i][j] = 0.5 * (p1[j] + p2[j] - p3[j]);
        }
        for (int x = 0; x < 4; x++)
            for (int k = 0; k < 10; k++) {
                for (int j = 0; j < CB; j++) acc[j] = 0.0;
                for (int d = 0; d < 4; d++)
                    for (int j = 0; j < CB; j++) acc[j] += gi[4 * x + d][j] * low[10 * d + k][j];
                memcpy(up[10 * x + k], acc, sizeof acc);
            }
        for (int m = 0; m < 21; m++) {
            int k1 = (int)(q1[m] / 10), j1 = (int)(q1[m] % 10);
            int k2 = (int)(q2[m] / 10), j2 = (int)(q2[m] % 10);
            double p1[CB], p2[CB], a1[CB], a2[CB];
            for (int j = 0; j < CB; j++) p1[j] = p2[j] = a1[j] = a2[j] = 0.0;
            for (int x = 0; x < 4; x++) {
                const double *u1 = up[10 * x + k1], *l1 = low[10 * x + j1];
                const double *u2 = up[10 * x + k2], *l2 = low[10 * x + j2];
                for (int j = 0; j < CB; j++) {
                    p1[j] += u1[j] * l1[j];
                    p2[j] += u2[j] * l2[j];
                    a1[j] += fabs(u1[j]) * fabs(l1[j]);
                    a2[j] += fabs(u2[j]) * fabs(l2[j]);
                }
            }
            const double *t1 = in[trows[m]], *t2 = in[trows[21 + m]];
            const double *t3 = in[trows[42 + m]], *t4 = in[trows[63 + m]];
            for (int j = 0; j < CB; j++) {
                r22[m][j] = 0.5 * ((t1[j] + t2[j]) - (t3[j] + t4[j])) + (p1[j] - p2[j]);
                double sc = 0.5 * (((fabs(t1[j]) + fabs(t2[j])) + fabs(t3[j])) + fabs(t4[j]))
                          + a1[j] + a2[j];
                o_s21[m][j] = sc + extra[e0 + (j < nb ? j : 0)] / EPS;
            }
        }
        for (int j = 0; j < CB; j++) r22[21][j] = 0.0;
        /* Terms on the zero row (R_abcd with a = b or c = d) add exactly 0 and
         * are left out; a sign of -1 subtracts the product (the same bits as
         * adding g (r (-1))). */
        for (int q = 0; q < 10; q++) {
            for (int j = 0; j < CB; j++) acc[j] = 0.0;
            for (int k = 0; k < 16; k++) {
                if (ric_rows[16 * q + k] == 21 || ric_sign[16 * q + k] == 0.0) continue;
                const double *gg = gi[ric_ginv[16 * q + k]], *rr = r22[ric_rows[16 * q + k]];
                if (ric_sign[16 * q + k] > 0)
                    for (int j = 0; j < CB; j++) acc[j] += gg[j] * rr[j];
                else
                    for (int j = 0; j < CB; j++) acc[j] -= gg[j] * rr[j];
            }
            memcpy(ric[q], acc, sizeof acc);
        }
        for (int j = 0; j < CB; j++) R[j] = 0.0;
        for (int i = 0; i < 16; i++) {
            const double *gg = gi[i], *rr = ric[pidx[i]];
            for (int j = 0; j < CB; j++) R[j] += gg[j] * rr[j];
        }
        for (Py_ssize_t j = 0; j < nb; j++) {
            Py_ssize_t e = e0 + j;
            for (int i = 0; i < 16; i++) {
                double gv = in[gidx[i]][j], rv = ric[pidx[i]][j];
                g_out[16 * e + i] = gv;
                gi_out[16 * e + i] = gi[i][j];
                ric_out[16 * e + i] = rv;
                ein_out[16 * e + i] = rv - 0.5 * R[j] * gv;
            }
            rs_out[e] = R[j];
        }
        for (int i = 0; i < 40; i++) memcpy(up_out + (Py_ssize_t)i * n + e0, up[i], nb * 8);
        for (int i = 0; i < 21; i++) {
            memcpy(r21_out + (Py_ssize_t)i * n + e0, r22[i], nb * 8);
            memcpy(s21_out + (Py_ssize_t)i * n + e0, o_s21[i], nb * 8);
        }
    }
    Py_END_ALLOW_THREADS
    release(&bufs);
    Py_RETURN_NONE;
bad:
    PyErr_SetString(PyExc_ValueError, "curvature: index table out of range");
fail:
    release(&bufs);
    return NULL;
}

/* ------------------------------------------------------------ margins */
static inline double quad3(double rho, const double *b, const double *A, const double *s)
{
    double bs = b[0] * s[0] + b[1] * s[1] + b[2] * s[2];
    double q = 0.0;
    for (int i = 0; i < 3; i++) {
        double r = A[3 * i] * s[0] + A[3 * i + 1] * s[1] + A[3 * i + 2] * s[2];
        q += s[i] * r;
    }
    return rho + 2.0 * bs + q;
}

/* Root t >= 0 of sum beta2_i/(d_i + t)^2 = 1 (margins._secular_t, one event). */
static double secular(const double *beta2, const double *d, int *hard_out)
{
    double babs[3], hi = 0.0, lo = 0.0, phi0 = 0.0;
    for (int i = 0; i < 3; i++) {
        babs[i] = sqrt(beta2[i]);
        hi += beta2[i];
        double x = babs[i] - d[i];
        if (i == 0 || x > lo) lo = x;
        if (d[i] > 0) phi0 += beta2[i] / (d[i] * d[i]);
    }
    hi = sqrt(hi);
    if (lo < 0.0) lo = 0.0;
    int hard = (lo <= 0.0) && (phi0 <= 1.0);
    *hard_out = hard;
    if (hard) return 0.0;
    double t = hi;
    if (hi <= lo) return t;
    for (int it = 0; it < 200; it++) {
        double phi = 0.0, dsum = 0.0;
        for (int i = 0; i < 3; i++) {
            double den = d[i] + t;
            if (den > 0) {
                phi += beta2[i] / (den * den);
                dsum += beta2[i] / (den * den * den);
            }
        }
        double h = 1.0 / sqrt(phi) - 1.0;
        double hp = dsum / (phi * sqrt(phi));      /* h' (only steers the step) */
        if (!isfinite(h)) h = INFINITY;
        if (h < 0) lo = t;
        if (h > 0) hi = t;
        double tn = t - h / hp;
        int inside = isfinite(tn) && tn > lo && tn < hi;
        double mid;
        if (lo > 0 && hi > 4.0 * lo) mid = sqrt(lo * hi);
        else mid = 0.5 * (lo + hi);
        if (!inside) tn = mid;
        if (fabs(h) <= 4.0 * EPS || hi - lo <= 4.0 * EPS * hi) break;
        t = tn;
    }
    return t;
}

/* Sphere minimiser from the eigen-decomposition (margins._sphere_min). */
static void sphere_point(const double *lam, const double *Q, const double *beta, double t,
                         double *s)
{
    double d[3], c[3];
    for (int i = 0; i < 3; i++) {
        d[i] = lam[i] - lam[0];
        if (d[i] < 0) d[i] = 0.0;
    }
    d[0] = 0.0;
    for (int i = 0; i < 3; i++) {
        double den = d[i] + t;
        c[i] = den > 0 ? -beta[i] / den : 0.0;
    }
    double deficit = 1.0 - (c[0] * c[0] + c[1] * c[1] + c[2] * c[2]);
    if (deficit > 0) {
        double sg = c[0] < 0 ? -1.0 : 1.0;
        c[0] = sg * sqrt(c[0] * c[0] + deficit);
    }
    for (int i = 0; i < 3; i++) s[i] = Q[3 * i] * c[0] + Q[3 * i + 1] * c[1] + Q[3 * i + 2] * c[2];
    double nr = sqrt(s[0] * s[0] + s[1] * s[1] + s[2] * s[2]);
    for (int i = 0; i < 3; i++) s[i] /= nr;
}

/* Interior candidate of the ball (margins._ball_min): updates val, w. */
static void ball_interior(double rho, const double *b, const double *A, const double *lam,
                          const double *Q, const double *beta, double *val, double *w)
{
    if (!(lam[0] > 0)) return;
    double c[3], n2 = 0.0;
    for (int i = 0; i < 3; i++) { c[i] = -beta[i] / lam[i]; n2 += c[i] * c[i]; }
    if (!(n2 < 1.0)) return;
    double wi[3];
    for (int i = 0; i < 3; i++) wi[i] = Q[3 * i] * c[0] + Q[3 * i + 1] * c[1] + Q[3 * i + 2] * c[2];
    double vi = quad3(rho, b, A, wi);
    if (vi < *val) {
        *val = vi;
        memcpy(w, wi, sizeof wi);
    }
}

/* margins(T (N,16) symmetrised, settled (N,) float 0/1, outputs)
 * out (N, 20): scale, valN, sN(3), vW, w(3), vS, ws(3), need, t, lam(3)
 * Q (N, 9): eigenvectors of the scaled A, columns. */
static PyObject *py_margins(PyObject *self, PyObject *args)
{
    PyObject *oT, *oS, *oOut, *oQ;
    Py_ssize_t n;
    Buffers bufs = {.n = 0};
    if (!PyArg_ParseTuple(args, "nOOOO", &n, &oT, &oS, &oOut, &oQ))
        return NULL;
    if (n < 0) { PyErr_SetString(PyExc_ValueError, "n < 0"); return NULL; }
    GETD(T, oT, 16 * n, 0);
    GETD(settled, oS, n, 0);
    GETD(out, oOut, 20 * n, 1);
    GETD(Qo, oQ, 9 * n, 1);
    Py_BEGIN_ALLOW_THREADS
    /* Blocks of JB events: the eigen-decompositions of A together
     * (jacobi3_block), the rest event by event. */
    double Ab[9][JB], lamb[3][JB], Qb[9][JB], tmaxb[JB];
    for (Py_ssize_t e0 = 0; e0 < n; e0 += JB) {
        Py_ssize_t nb = n - e0 < JB ? n - e0 : JB;
        for (int j = 0; j < JB; j++) {
            const double *Te = T + 16 * (e0 + (j < nb ? j : 0));
            double scale = 0.0;
            for (int i = 0; i < 16; i++) if (fabs(Te[i]) > scale) scale = fabs(Te[i]);
            tmaxb[j] = scale;
            if (!(scale > 0)) scale = 1.0;
            for (int i = 0; i < 3; i++)
                for (int k = 0; k < 3; k++) Ab[3 * i + k][j] = Te[4 * (i + 1) + k + 1] / scale;
        }
        jacobi3_block(Ab, lamb, Qb);
        for (Py_ssize_t j = 0; j < nb; j++) {
            Py_ssize_t e = e0 + j;
            const double *Te = T + 16 * e;
            double tmax = tmaxb[j], scale = tmax > 0 ? tmax : 1.0;
            double rho = Te[0] / scale, b[3], A[9], lam[3], Q[9], beta[3], beta2[3], d[3];
            for (int i = 0; i < 3; i++) {
                b[i] = Te[1 + i] / scale;
                for (int k = 0; k < 3; k++) A[3 * i + k] = Te[4 * (i + 1) + k + 1] / scale;
                lam[i] = lamb[i][j];
            }
            for (int i = 0; i < 9; i++) Q[i] = Qb[i][j];
            for (int i = 0; i < 3; i++) {
                beta[i] = Q[i] * b[0] + Q[3 + i] * b[1] + Q[6 + i] * b[2];
                beta2[i] = beta[i] * beta[i];
                d[i] = lam[i] - lam[0];
                if (d[i] < 0) d[i] = 0.0;
            }
            d[0] = 0.0;
            int hard;
            double t = secular(beta2, d, &hard);
            double s[3];
            sphere_point(lam, Q, beta, t, s);
            double valN = quad3(rho, b, A, s);
            double vW = valN, w[3] = {s[0], s[1], s[2]};
            ball_interior(rho, b, A, lam, Q, beta, &vW, w);
            /* SEC: X = T - 1/2 (tr T) eta, same eigenvectors, eigenvalues shifted by c */
            double trA = A[0] + A[4] + A[8];
            double trT = -rho + trA;
            double x00 = rho + 0.5 * trT, xA[9], lamx[3];
            memcpy(xA, A, sizeof A);
            for (int i = 0; i < 3; i++) xA[4 * i] = A[4 * i] - 0.5 * trT;
            double cshift = 0.5 * (trA - rho);
            for (int i = 0; i < 3; i++) lamx[i] = lam[i] - cshift;
            double vS = quad3(x00, b, xA, s), ws[3] = {s[0], s[1], s[2]};
            ball_interior(x00, b, xA, lamx, Q, beta, &vS, ws);
            double amax = fabs(lam[0]);
            for (int i = 1; i < 3; i++) if (fabs(lam[i]) > amax) amax = fabs(lam[i]);
            double need = (t - lam[0] < amax) && !(settled[e] != 0.0);
            double *o = out + 20 * e;
            o[0] = scale; o[1] = valN; o[2] = s[0]; o[3] = s[1]; o[4] = s[2];
            o[5] = vW; o[6] = w[0]; o[7] = w[1]; o[8] = w[2];
            o[9] = vS; o[10] = ws[0]; o[11] = ws[1]; o[12] = ws[2];
            o[13] = need; o[14] = t; o[15] = lam[0]; o[16] = lam[1]; o[17] = lam[2];
            o[18] = hard; o[19] = tmax;
            memcpy(Qo + 9 * e, Q, sizeof Q);
        }
    }
    Py_END_ALLOW_THREADS
    release(&bufs);
    Py_RETURN_NONE;
fail:
    release(&bufs);
    return NULL;
}

/* ------------------------------------------------------------ DEC search */
typedef struct { double rho, b[3], A[9]; } Stress;

static inline void matvec3(const double *A, const double *s, double *r)
{
    for (int i = 0; i < 3; i++) r[i] = A[3 * i] * s[0] + A[3 * i + 1] * s[1] + A[3 * i + 2] * s[2];
}

static inline double decval(const Stress *S, const double *s1, const double *s2)
{
    double r[3];
    matvec3(S->A, s2, r);
    return S->rho + ((s1[0] + s2[0]) * S->b[0] + (s1[1] + s2[1]) * S->b[1]
                     + (s1[2] + s2[2]) * S->b[2])
        + (s1[0] * r[0] + s1[1] * r[1] + s1[2] * r[2]);
}

/* argmin over unit s2 of b.s2 + s^T A s2; `prev` where b + A s vanishes. */
static inline void partner(const Stress *S, const double *s, const double *prev, double *out)
{
    double r[3];
    matvec3(S->A, s, r);
    for (int i = 0; i < 3; i++) r[i] += S->b[i];
    double nr = sqrt(r[0] * r[0] + r[1] * r[1] + r[2] * r[2]);
    if (nr > 0)
        for (int i = 0; i < 3; i++) out[i] = -r[i] / nr;
    else
        for (int i = 0; i < 3; i++) out[i] = prev[i];
}

static inline void unit3(double *v)
{
    double nr = sqrt(v[0] * v[0] + v[1] * v[1] + v[2] * v[2]);
    for (int i = 0; i < 3; i++) v[i] /= nr;
}

static inline void cross3(const double *a, const double *b, double *c)
{
    c[0] = a[1] * b[2] - a[2] * b[1];
    c[1] = a[2] * b[0] - a[0] * b[2];
    c[2] = a[0] * b[1] - a[1] * b[0];
}

/* Tangent basis (columns u, v) at unit s: E[3*i + k], k = 0, 1. */
static void tangent_basis(const double *s, double *E)
{
    int idx = 0;
    for (int i = 1; i < 3; i++) if (fabs(s[i]) < fabs(s[idx])) idx = i;
    double e[3] = {0, 0, 0}, u[3], v[3];
    e[idx] = 1.0;
    cross3(s, e, u);
    unit3(u);
    cross3(s, u, v);
    for (int i = 0; i < 3; i++) { E[2 * i] = u[i]; E[2 * i + 1] = v[i]; }
}

static double dec_try(const Stress *S, const double *p1, const double *p2, const double *E1,
                      const double *E2, const double *step, double frac, double *t1, double *t2)
{
    for (int i = 0; i < 3; i++) {
        t1[i] = p1[i] + (E1[2 * i] * (frac * step[0]) + E1[2 * i + 1] * (frac * step[1]));
        t2[i] = p2[i] + (E2[2 * i] * (frac * step[2]) + E2[2 * i + 1] * (frac * step[3]));
    }
    unit3(t1);
    unit3(t2);
    return decval(S, t1, t2);
}

/* Eigen-decomposition of the symmetric 2x2 [[a, b], [b, c]] by one Jacobi
 * rotation (the same formulas as jacobi()): eigenvalues ascending in w,
 * vectors in the columns of v (row-major). */
static void sym2(double a, double b, double c, double *w, double *v)
{
    double cs = 1.0, sn = 0.0, w0 = a, w1 = c;
    if (b != 0.0) {
        double theta = (c - a) / (2.0 * b);
        double t = (theta >= 0 ? 1.0 : -1.0) / (fabs(theta) + sqrt(theta * theta + 1.0));
        if (!isfinite(theta)) t = 0.5 / theta;
        cs = 1.0 / sqrt(t * t + 1.0);
        sn = t * cs;
        w0 = a - t * b;
        w1 = c + t * b;
    }
    if (w0 <= w1) {
        w[0] = w0; w[1] = w1;
        v[0] = cs; v[1] = sn; v[2] = -sn; v[3] = cs;
    } else {
        w[0] = w1; w[1] = w0;
        v[0] = sn; v[1] = cs; v[2] = cs; v[3] = -sn;
    }
}

/* Eigen-decomposition of H = [[p I, C], [C^T, q I]] (4x4, C the 2x2 block
 * H[0:2, 2:4]): with C^T C = V diag(sigma^2) V^T and u_k = C v_k / sigma_k,
 * the planes span{(u_k, 0), (0, v_k)} are invariant and H acts on each as
 * [[p, sigma_k], [sigma_k, q]]. Eigenvalues ascending in w, vectors in the
 * columns of V4 (row-major 4x4). */
static void hessian_eigen(double p, double q, const double *H, double *w, double *V4)
{
    double C[4] = {H[2], H[3], H[6], H[7]};       /* C[2*i + j] = H[i][2 + j] */
    double M[4], sg2[2], V[4], U[4], sig[2];
    M[0] = C[0] * C[0] + C[2] * C[2];
    M[1] = M[2] = C[0] * C[1] + C[2] * C[3];
    M[3] = C[1] * C[1] + C[3] * C[3];
    sym2(M[0], M[1], M[3], sg2, V);
    for (int k = 1; k >= 0; k--) {                /* larger singular value first */
        double u0 = C[0] * V[k] + C[1] * V[2 + k], u1 = C[2] * V[k] + C[3] * V[2 + k];
        double nr = sqrt(u0 * u0 + u1 * u1);
        sig[k] = nr;
        if (k == 1) {
            if (nr > 0) { U[1] = u0 / nr; U[3] = u1 / nr; }
            else { U[1] = 1.0; U[3] = 0.0; }
        } else {
            /* the other left vector: orthogonal to the first, signed so that
             * u_0 . C v_0 = sigma_0 >= 0 */
            double o0 = -U[3], o1 = U[1];
            double sgn = (o0 * u0 + o1 * u1) < 0 ? -1.0 : 1.0;
            U[0] = sgn * o0; U[2] = sgn * o1;
            sig[0] = fabs(o0 * u0 + o1 * u1);
        }
    }
    (void)sg2;
    double ww[4], VV[16];
    for (int k = 0; k < 2; k++) {
        double mu[2], Z[4];
        sym2(p, sig[k], q, mu, Z);
        for (int j = 0; j < 2; j++) {
            int col = 2 * k + j;
            ww[col] = mu[j];
            VV[4 * 0 + col] = Z[j] * U[k];       /* (alpha u_k, beta v_k) */
            VV[4 * 1 + col] = Z[j] * U[2 + k];
            VV[4 * 2 + col] = Z[2 + j] * V[k];
            VV[4 * 3 + col] = Z[2 + j] * V[2 + k];
        }
    }
    int idx[4] = {0, 1, 2, 3};
    for (int i = 1; i < 4; i++) {
        int j = i;
        while (j > 0 && ww[idx[j - 1]] > ww[idx[j]]) { int t = idx[j]; idx[j] = idx[j - 1]; idx[j - 1] = t; j--; }
    }
    for (int c = 0; c < 4; c++) {
        w[c] = ww[idx[c]];
        for (int r = 0; r < 4; r++) V4[4 * r + c] = VV[4 * r + idx[c]];
    }
}

#define STOP_DECREASE 1e-17
static const double CURV_STEPS[6] = {0.5, 0.2, 0.08, 0.03, 0.01, 0.003};

/* Safeguarded saddle-free Riemannian Newton on S2 x S2 (margins._dec_newton). */
static double dec_newton(const Stress *S, double *s1, double *s2, double F, int iters,
                         int backtrack)
{
    for (int it = 0; it < iters; it++) {
        double g1[3], g2[3], E1[6], E2[6], G[4], H[16], w[4], V[16];
        matvec3(S->A, s2, g1);
        matvec3(S->A, s1, g2);
        for (int i = 0; i < 3; i++) { g1[i] += S->b[i]; g2[i] += S->b[i]; }
        double a1 = s1[0] * g1[0] + s1[1] * g1[1] + s1[2] * g1[2];
        double a2 = s2[0] * g2[0] + s2[1] * g2[1] + s2[2] * g2[2];
        tangent_basis(s1, E1);
        tangent_basis(s2, E2);
        for (int k = 0; k < 2; k++) {
            G[k] = g1[0] * E1[k] + g1[1] * E1[2 + k] + g1[2] * E1[4 + k];
            G[2 + k] = g2[0] * E2[k] + g2[1] * E2[2 + k] + g2[2] * E2[4 + k];
        }
        memset(H, 0, sizeof H);
        H[0] = H[5] = -a1;
        H[10] = H[15] = -a2;
        for (int k = 0; k < 2; k++)
            for (int l = 0; l < 2; l++) {
                double c = 0.0;
                for (int i = 0; i < 3; i++) {
                    double ae = S->A[3 * i] * E2[l] + S->A[3 * i + 1] * E2[2 + l]
                              + S->A[3 * i + 2] * E2[4 + l];
                    c += E1[2 * i + k] * ae;
                }
                H[4 * k + 2 + l] = c;
                H[4 * (2 + l) + k] = c;
            }
        hessian_eigen(-a1, -a2, H, w, V);
        double step[4] = {0, 0, 0, 0};
        for (int j = 0; j < 4; j++) {
            double wa = fabs(w[j]);
            if (wa < 1e-10) wa = 1e-10;
            double gv = G[0] * V[j] + G[1] * V[4 + j] + G[2] * V[8 + j] + G[3] * V[12 + j];
            double coef = gv / wa;
            for (int i = 0; i < 4; i++) step[i] -= V[4 * i + j] * coef;
        }
        double nrm = sqrt(step[0] * step[0] + step[1] * step[1] + step[2] * step[2]
                          + step[3] * step[3]);
        if (nrm > 0.5) for (int i = 0; i < 4; i++) step[i] *= 0.5 / nrm;
        double t1[3], t2[3], u1[3], u2[3];
        double gn = sqrt(G[0] * G[0] + G[1] * G[1] + G[2] * G[2] + G[3] * G[3]);
        double best = dec_try(S, s1, s2, E1, E2, step, 1.0, t1, t2);
        /* A refused step is shortened, unless its model decrease ~|G||step| is
         * already at the round-off of F: a shorter one could then lower F by
         * round-off only (the row stops below, at a point that is no saddle
         * if the curvature steps find nothing either). */
        if (best >= F && gn * nrm > STOP_DECREASE) {
            double frac = 1.0;
            for (int k = 0; k < backtrack; k++) {
                frac *= 0.25;
                double fn = dec_try(S, s1, s2, E1, E2, step, frac, u1, u2);
                if (fn < best) { best = fn; memcpy(t1, u1, sizeof u1); memcpy(t2, u2, sizeof u2); }
                if (fn < F) break;
            }
        }
        if (w[0] < 0) {
            double v[4] = {V[0], V[4], V[8], V[12]};
            double gv = G[0] * v[0] + G[1] * v[1] + G[2] * v[2] + G[3] * v[3];
            double sg = gv > 0 ? -1.0 : 1.0;
            for (int i = 0; i < 4; i++) v[i] *= sg;
            for (int k = 0; k < 6; k++) {
                double fn = dec_try(S, s1, s2, E1, E2, v, CURV_STEPS[k], u1, u2);
                if (fn < best) { best = fn; memcpy(t1, u1, sizeof u1); memcpy(t2, u2, sizeof u2); }
            }
        }
        int better = best < F;
        double decrease = F - best;
        if (better) {
            memcpy(s1, t1, sizeof t1);
            memcpy(s2, t2, sizeof t2);
            F = best;
        }
        if (!(better && gn > 4.0 * EPS)) break;
        /* Converged: the model decrease of the Newton step, ~|G||step|, and
         * the decrease actually obtained are both at the round-off of F
         * (scaled units, |F| <= 7): the point is within ~1e-9 of a stationary
         * point that is not a saddle (a step along negative curvature would
         * have lowered F by far more), and F, stationary there, is exact to
         * round-off. */
        if (gn * nrm <= STOP_DECREASE && decrease <= 10.0 * STOP_DECREASE) break;
    }
    return F;
}

#define MAX_STARTS 64

/* dec(n, rho (N), b (N,3), A (N,9), sN (N,3), Q (N,9), dirs (K,3), K, m, params, out (N,7))
 * params: alternations, newton, polished, backtrack. out: val, s1(3), s2(3). */
WIDE static PyObject *py_dec(PyObject *self, PyObject *args)
{
    PyObject *oR, *oB, *oA, *oSN, *oQ, *oD, *oOut;
    Py_ssize_t n, K, m;
    int alternations, newton, polished, backtrack;
    Buffers bufs = {.n = 0};
    if (!PyArg_ParseTuple(args, "nOOOOOOnniiiiO", &n, &oR, &oB, &oA, &oSN, &oQ, &oD, &K, &m,
                          &alternations, &newton, &polished, &backtrack, &oOut))
        return NULL;
    if (n < 0 || K < 1 || m < 1 || m > K || m + 7 > MAX_STARTS || polished < 1
        || polished > MAX_STARTS) {
        PyErr_SetString(PyExc_ValueError, "dec: bad sizes");
        return NULL;
    }
    GETD(rho, oR, n, 0);
    GETD(bb, oB, 3 * n, 0);
    GETD(AA, oA, 9 * n, 0);
    GETD(sN, oSN, 3 * n, 0);
    GETD(QQ, oQ, 9 * n, 0);
    GETD(dirs, oD, 3 * K, 0);
    GETD(out, oOut, 7 * n, 1);
    double *scan = (double *)PyMem_RawMalloc((size_t)K * sizeof(double));
    if (!scan) { PyErr_NoMemory(); goto fail; }
    Py_BEGIN_ALLOW_THREADS
    for (Py_ssize_t e = 0; e < n; e++) {
        Stress S;
        S.rho = rho[e];
        memcpy(S.b, bb + 3 * e, sizeof S.b);
        memcpy(S.A, AA + 9 * e, sizeof S.A);
        const double *Q = QQ + 9 * e, *sn = sN + 3 * e;
        /* (i) scan: keep the m best directions (ties: lower index first). The
         * values first, in a branch-free loop over the directions (components
         * stored apart, so that it vectorises), then the selection. */
        double bestv[MAX_STARTS];
        Py_ssize_t besti[MAX_STARTS];
        int nb = 0;
        {
            const double *dx = dirs, *dy = dirs + K, *dz = dirs + 2 * K;
            const double a00 = S.A[0], a01 = S.A[1], a02 = S.A[2], a10 = S.A[3], a11 = S.A[4],
                         a12 = S.A[5], a20 = S.A[6], a21 = S.A[7], a22 = S.A[8];
            const double b0 = S.b[0], b1_ = S.b[1], b2_ = S.b[2], rh = S.rho;
            for (Py_ssize_t k = 0; k < K; k++) {
                double r0 = b0 + a00 * dx[k] + a01 * dy[k] + a02 * dz[k];
                double r1 = b1_ + a10 * dx[k] + a11 * dy[k] + a12 * dz[k];
                double r2_ = b2_ + a20 * dx[k] + a21 * dy[k] + a22 * dz[k];
                scan[k] = rh + b0 * dx[k] + b1_ * dy[k] + b2_ * dz[k]
                        - sqrt(r0 * r0 + r1 * r1 + r2_ * r2_);
            }
        }
        for (Py_ssize_t k = 0; k < K; k++) {
            double gv = scan[k];
            if (nb < m || gv < bestv[nb - 1]) {
                int j = nb < m ? nb++ : (int)m - 1;
                while (j > 0 && bestv[j - 1] > gv) {
                    bestv[j] = bestv[j - 1]; besti[j] = besti[j - 1]; j--;
                }
                bestv[j] = gv; besti[j] = k;
            }
        }
        /* (ii) starts */
        double s1[MAX_STARTS][3], s2[MAX_STARTS][3], F[MAX_STARTS];
        int k = 0;
        for (int j = 0; j < nb; j++, k++) {
            s1[k][0] = dirs[besti[j]];
            s1[k][1] = dirs[K + besti[j]];
            s1[k][2] = dirs[2 * K + besti[j]];
        }
        int nec_row = k;
        memcpy(s1[k++], sn, 3 * sizeof(double));
        for (int sg = 0; sg < 2; sg++)
            for (int i = 0; i < 3; i++) s1[k + sg][i] = (sg ? -1.0 : 1.0) * Q[3 * i];
        k += 2;
        for (int sg = 0; sg < 2; sg++)
            for (int i = 0; i < 3; i++) s1[k + sg][i] = (sg ? -1.0 : 1.0) * Q[3 * i + 2];
        k += 2;
        double bn = sqrt(S.b[0] * S.b[0] + S.b[1] * S.b[1] + S.b[2] * S.b[2]);
        for (int i = 0; i < 3; i++) {
            double bh = bn > 0 ? S.b[i] / bn : Q[3 * i + 1];
            s1[k][i] = bh;
            s1[k + 1][i] = -bh;
        }
        k += 2;
        for (int j = 0; j < k; j++) partner(&S, s1[j], s1[j], s2[j]);
        memcpy(s2[nec_row], sn, 3 * sizeof(double));
        /* (iii) alternation, checked every 5 steps. All starts advance in
         * lockstep, components stored apart (independent chains the processor
         * overlaps, and that vectorise); a start that has stopped keeps its
         * vectors. Each start goes through exactly the steps it would alone. */
        {
            double X1[3][MAX_STARTS], X2[3][MAX_STARTS], P1[3][MAX_STARTS], P2[3][MAX_STARTS];
            int live[MAX_STARTS];
            for (int j = 0; j < k; j++) {
                live[j] = 1;
                for (int i = 0; i < 3; i++) { X1[i][j] = s1[j][i]; X2[i][j] = s2[j][i]; }
            }
            const double *A = S.A, *bv = S.b;
            int done = 0, any = 1;
            while (done < alternations && any) {
                int steps = alternations - done < 5 ? alternations - done : 5;
                for (int st = 0; st < steps; st++) {
                    for (int i = 0; i < 3; i++)
                        for (int j = 0; j < k; j++) { P1[i][j] = X1[i][j]; P2[i][j] = X2[i][j]; }
                    for (int half = 0; half < 2; half++) {
                        /* half 0: s1 <- partner(s2, prev s1); half 1: s2 <- partner(s1, prev s2) */
                        double (*src)[MAX_STARTS] = half ? X1 : X2;
                        double (*dst)[MAX_STARTS] = half ? X2 : X1;
                        double (*prev)[MAX_STARTS] = half ? P2 : P1;
                        for (int j = 0; j < k; j++) {
                            double r0 = A[0] * src[0][j] + A[1] * src[1][j] + A[2] * src[2][j] + bv[0];
                            double r1 = A[3] * src[0][j] + A[4] * src[1][j] + A[5] * src[2][j] + bv[1];
                            double r2 = A[6] * src[0][j] + A[7] * src[1][j] + A[8] * src[2][j] + bv[2];
                            double nr = sqrt(r0 * r0 + r1 * r1 + r2 * r2);
                            int ok = nr > 0 && live[j];
                            double d = nr > 0 ? nr : 1.0;
                            dst[0][j] = ok ? -(r0 / d) : (live[j] ? prev[0][j] : dst[0][j]);
                            dst[1][j] = ok ? -(r1 / d) : (live[j] ? prev[1][j] : dst[1][j]);
                            dst[2][j] = ok ? -(r2 / d) : (live[j] ? prev[2][j] : dst[2][j]);
                        }
                    }
                }
                done += 5;
                any = 0;
                for (int j = 0; j < k; j++) {
                    if (!live[j]) continue;
                    double mv = 0.0;
                    for (int i = 0; i < 3; i++) {
                        double d1 = fabs(X1[i][j] - P1[i][j]), d2 = fabs(X2[i][j] - P2[i][j]);
                        if (d1 > mv) mv = d1;
                        if (d2 > mv) mv = d2;
                    }
                    live[j] = mv > 1e-10;
                    any |= live[j];
                }
            }
            for (int j = 0; j < k; j++) {
                for (int i = 0; i < 3; i++) { s1[j][i] = X1[i][j]; s2[j][i] = X2[i][j]; }
                F[j] = decval(&S, s1[j], s2[j]);
            }
        }
        /* (iv) Newton on the `polished` best starts (stable order) */
        int order[MAX_STARTS];
        for (int j = 0; j < k; j++) {
            int i = j;
            while (i > 0 && F[order[i - 1]] > F[j]) { order[i] = order[i - 1]; i--; }
            order[i] = j;
        }
        int np_ = polished < k ? polished : k;
        double val = INFINITY, b1[3] = {0, 0, 0}, b2[3] = {0, 0, 0};
        for (int j = 0; j < np_; j++) {
            int r = order[j];
            double p1[3], p2[3];
            memcpy(p1, s1[r], sizeof p1);
            memcpy(p2, s2[r], sizeof p2);
            double f = dec_newton(&S, p1, p2, F[r], newton, backtrack);
            if (f < val) { val = f; memcpy(b1, p1, sizeof p1); memcpy(b2, p2, sizeof p2); }
        }
        /* (v) the NEC pair */
        double vN = decval(&S, sn, sn);
        if (vN < val) { val = vN; memcpy(b1, sn, sizeof b1); memcpy(b2, sn, sizeof b2); }
        double *o = out + 7 * e;
        o[0] = val;
        memcpy(o + 1, b1, sizeof b1);
        memcpy(o + 4, b2, sizeof b2);
    }
    Py_END_ALLOW_THREADS
    PyMem_RawFree(scan);
    release(&bufs);
    Py_RETURN_NONE;
fail:
    release(&bufs);
    return NULL;
}

/* ------------------------------------------------------------ frames */
/* eulerian(g (N,16), ginv (N,16), E out (N,16), ok out (N,) float 0/1):
 * frames.tetrads.eulerian, event by event (modified Gram-Schmidt of the
 * coordinate axes after n^mu = -N g^{t mu}). */
WIDE static PyObject *py_eulerian(PyObject *self, PyObject *args)
{
    PyObject *oG, *oGi, *oE, *oOk;
    Py_ssize_t n;
    Buffers bufs = {.n = 0};
    if (!PyArg_ParseTuple(args, "nOOOO", &n, &oG, &oGi, &oE, &oOk))
        return NULL;
    if (n < 0) { PyErr_SetString(PyExc_ValueError, "n < 0"); return NULL; }
    GETD(g, oG, 16 * n, 0);
    GETD(gi, oGi, 16 * n, 0);
    GETD(E, oE, 16 * n, 1);
    GETD(ok, oOk, n, 1);
    Py_BEGIN_ALLOW_THREADS
    /* Blocks of EB events, structure-of-arrays, events innermost: each event
     * goes through the operations of a loop over single events, in the same
     * order (the square roots and divisions of a block share wide registers). */
    enum { EB = 16 };
    double Gb[16][EB], L[4][4][EB], w[4][EB], ga[EB], dot[EB], nr[EB];
    for (Py_ssize_t e0 = 0; e0 < n; e0 += EB) {
        Py_ssize_t nb = n - e0 < EB ? n - e0 : EB;
        for (int j = 0; j < EB; j++) {
            Py_ssize_t e = e0 + (j < nb ? j : 0);        /* padding: the block's first event */
            for (int i = 0; i < 16; i++) Gb[i][j] = g[16 * e + i];
            double lapse = 1.0 / sqrt(-gi[16 * e]);
            for (int m = 0; m < 4; m++) L[0][m][j] = -lapse * gi[16 * e + m];
        }
        for (int k = 1; k < 4; k++) {
            for (int a_ = 0; a_ < 4; a_++)
                for (int j = 0; j < EB; j++) w[a_][j] = a_ == k ? 1.0 : 0.0;
            for (int jj = 0; jj < k; jj++) {
                double eta = jj == 0 ? -1.0 : 1.0;
                for (int j = 0; j < EB; j++) dot[j] = 0.0;
                for (int a_ = 0; a_ < 4; a_++) {
                    for (int j = 0; j < EB; j++) ga[j] = 0.0;
                    for (int b_ = 0; b_ < 4; b_++)
                        for (int j = 0; j < EB; j++) ga[j] += Gb[4 * a_ + b_][j] * L[jj][b_][j];
                    for (int j = 0; j < EB; j++) dot[j] += w[a_][j] * ga[j];
                }
                for (int a_ = 0; a_ < 4; a_++)
                    for (int j = 0; j < EB; j++) w[a_][j] -= eta * dot[j] * L[jj][a_][j];
            }
            for (int j = 0; j < EB; j++) dot[j] = 0.0;      /* n2 = g(w, w) */
            for (int a_ = 0; a_ < 4; a_++) {
                for (int j = 0; j < EB; j++) ga[j] = 0.0;
                for (int b_ = 0; b_ < 4; b_++)
                    for (int j = 0; j < EB; j++) ga[j] += Gb[4 * a_ + b_][j] * w[b_][j];
                for (int j = 0; j < EB; j++) dot[j] += w[a_][j] * ga[j];
            }
            for (int j = 0; j < EB; j++) nr[j] = sqrt(dot[j]);
            for (int a_ = 0; a_ < 4; a_++)
                for (int j = 0; j < EB; j++) L[k][a_][j] = w[a_][j] / nr[j];
        }
        for (Py_ssize_t j = 0; j < nb; j++) {
            Py_ssize_t e = e0 + j;
            int fin = gi[16 * e] < 0;
            for (int a_ = 0; a_ < 4; a_++)
                for (int b_ = 0; b_ < 4; b_++) {
                    E[16 * e + 4 * a_ + b_] = L[a_][b_][j];
                    if (!isfinite(L[a_][b_][j])) fin = 0;
                }
            ok[e] = fin;
        }
    }
    Py_END_ALLOW_THREADS
    release(&bufs);
    Py_RETURN_NONE;
fail:
    release(&bufs);
    return NULL;
}

/* frame(E (N,16), G (N,16) Einstein, r21 (21,N), s21 (21,N), r21idx (36), bi, bj (6),
 *       T out (N,16), fscale out (N,), tidal out (N,9), eig out (N,3), vec out (N,9))
 * T = E G E^T / 8 pi symmetrised (conditions.stress.frame_stress); fscale =
 * max of |W| S |W|^T (conditions.stress.frame_scale); tidal E_ij = R_{i0j0}
 * (crew.tidal.tidal_from_bivectors) with its eigenvalues (ascending) if
 * want_tidal is 1, and also its eigenvectors (columns; NaN otherwise) if 2. */
WIDE static PyObject *py_frame(PyObject *self, PyObject *args)
{
    PyObject *o[12];
    Py_ssize_t n;
    int want_tidal;
    Buffers bufs = {.n = 0};
    if (!PyArg_ParseTuple(args, "nOOOOOOOOOOOOi", &n, &o[0], &o[1], &o[2], &o[3], &o[4],
                          &o[5], &o[6], &o[7], &o[8], &o[9], &o[10], &o[11], &want_tidal))
        return NULL;
    if (n < 0) { PyErr_SetString(PyExc_ValueError, "n < 0"); return NULL; }
    GETD(Ev, o[0], 16 * n, 0);
    GETD(Gv, o[1], 16 * n, 0);
    GETD(r21, o[2], 21 * n, 0);
    GETD(s21, o[3], 21 * n, 0);
    GETI(r21idx, o[4], 36);
    GETI(bi, o[5], 6);
    GETI(bj, o[6], 6);
    GETD(Tout, o[7], 16 * n, 1);
    GETD(fs, o[8], n, 1);
    GETD(tid, o[9], 9 * n, 1);
    GETD(eig, o[10], 3 * n, 1);
    GETD(vec, o[11], 9 * n, 1);
    for (int i = 0; i < 6; i++) if (bi[i] < 0 || bi[i] >= 4 || bj[i] < 0 || bj[i] >= 4) goto bad;
    for (int i = 0; i < 36; i++) if (r21idx[i] < 0 || r21idx[i] >= 21) goto bad;
    Py_BEGIN_ALLOW_THREADS
    /* Blocks of FB events, structure-of-arrays, events innermost (as in
     * py_curvature); the eigen-decomposition of the tidal tensor per event. */
    enum { FB = JB };            /* the tidal eigen-decompositions go by jacobi3_block */
    double E[16][FB], G[16][FB], R6[36][FB], S6[36][FB], W[36][FB], Wa[36][FB];
    double EG[16][FB], Y[36][FB], acc[FB], mx[FB], Z[18][FB], X[9][FB];
    for (Py_ssize_t e0 = 0; e0 < n; e0 += FB) {
        Py_ssize_t nb = n - e0 < FB ? n - e0 : FB;
        if (nb == FB) {                           /* a whole block: plain strided loads */
            for (int i = 0; i < 16; i++)
                for (int j = 0; j < FB; j++) {
                    E[i][j] = Ev[16 * (e0 + j) + i];
                    G[i][j] = Gv[16 * (e0 + j) + i];
                }
            for (int A = 0; A < 36; A++) {
                const double *rr = r21 + r21idx[A] * n + e0, *ss = s21 + r21idx[A] * n + e0;
                for (int j = 0; j < FB; j++) { R6[A][j] = rr[j]; S6[A][j] = ss[j]; }
            }
        } else {                                  /* the last block, padded with its first event */
            for (int i = 0; i < 16; i++)
                for (int j = 0; j < FB; j++) {
                    Py_ssize_t e = e0 + (j < nb ? j : 0);
                    E[i][j] = Ev[16 * e + i];
                    G[i][j] = Gv[16 * e + i];
                }
            for (int A = 0; A < 36; A++)
                for (int j = 0; j < FB; j++) {
                    Py_ssize_t e = e0 + (j < nb ? j : 0);
                    R6[A][j] = r21[r21idx[A] * n + e];
                    S6[A][j] = s21[r21idx[A] * n + e];
                }
        }
        /* T_ab = sum_mv E[a,m] E[b,v] G[m,v] / 8 pi, symmetrised */
        for (int b_ = 0; b_ < 4; b_++)
            for (int m = 0; m < 4; m++) {
                for (int j = 0; j < FB; j++) acc[j] = 0.0;
                for (int v = 0; v < 4; v++)
                    for (int j = 0; j < FB; j++) acc[j] += E[4 * b_ + v][j] * G[4 * m + v][j];
                memcpy(EG[4 * b_ + m], acc, sizeof acc);
            }
        double Tb[16][FB];
        for (int a_ = 0; a_ < 4; a_++)
            for (int b_ = 0; b_ < 4; b_++) {
                for (int j = 0; j < FB; j++) acc[j] = 0.0;
                for (int m = 0; m < 4; m++)
                    for (int j = 0; j < FB; j++) acc[j] += E[4 * a_ + m][j] * EG[4 * b_ + m][j];
                for (int j = 0; j < FB; j++) Tb[4 * a_ + b_][j] = acc[j] / (8.0 * M_PI);
            }
        for (Py_ssize_t j = 0; j < nb; j++)
            for (int a_ = 0; a_ < 4; a_++)
                for (int b_ = 0; b_ < 4; b_++)
                    Tout[16 * (e0 + j) + 4 * a_ + b_] = 0.5 * (Tb[4 * a_ + b_][j] + Tb[4 * b_ + a_][j]);
        /* bivector weights: W[Ahat, A] = e_i^al e_j^be - e_i^be e_j^al */
        for (int P = 0; P < 6; P++)
            for (int A = 0; A < 6; A++) {
                const double *p1 = E[4 * bi[P] + bi[A]], *p2 = E[4 * bj[P] + bj[A]];
                const double *p3 = E[4 * bi[P] + bj[A]], *p4 = E[4 * bj[P] + bi[A]];
                for (int j = 0; j < FB; j++) {
                    W[6 * P + A][j] = p1[j] * p2[j] - p3[j] * p4[j];
                    Wa[6 * P + A][j] = fabs(p1[j]) * fabs(p2[j]) + fabs(p3[j]) * fabs(p4[j]);
                }
            }
        for (int A = 0; A < 6; A++)
            for (int C = 0; C < 6; C++) {
                for (int j = 0; j < FB; j++) acc[j] = 0.0;
                for (int B = 0; B < 6; B++)
                    for (int j = 0; j < FB; j++) acc[j] += Wa[6 * A + B][j] * S6[6 * B + C][j];
                memcpy(Y[6 * A + C], acc, sizeof acc);
            }
        for (int j = 0; j < FB; j++) mx[j] = 0.0;
        for (int A = 0; A < 6; A++)
            for (int D = 0; D < 6; D++) {
                for (int j = 0; j < FB; j++) acc[j] = 0.0;
                for (int C = 0; C < 6; C++)
                    for (int j = 0; j < FB; j++) acc[j] += Y[6 * A + C][j] * Wa[6 * D + C][j];
                for (int j = 0; j < FB; j++)
                    if (acc[j] > mx[j] || isnan(acc[j])) mx[j] = acc[j];
            }
        for (Py_ssize_t j = 0; j < nb; j++) fs[e0 + j] = mx[j];
        if (want_tidal) {
            for (int i = 0; i < 3; i++)
                for (int B = 0; B < 6; B++) {
                    for (int j = 0; j < FB; j++) acc[j] = 0.0;
                    for (int A = 0; A < 6; A++)
                        for (int j = 0; j < FB; j++) acc[j] += W[6 * i + A][j] * R6[6 * A + B][j];
                    memcpy(Z[6 * i + B], acc, sizeof acc);
                }
            for (int i = 0; i < 3; i++)
                for (int k = 0; k < 3; k++) {
                    for (int j = 0; j < FB; j++) acc[j] = 0.0;
                    for (int B = 0; B < 6; B++)
                        for (int j = 0; j < FB; j++) acc[j] += Z[6 * i + B][j] * W[6 * k + B][j];
                    memcpy(X[3 * i + k], acc, sizeof acc);
                }
            /* the symmetrised tidal tensors, then their eigen-decompositions
             * together (a non-finite one, or padding, replaced by zeros and
             * its results by NaN) */
            double Xb[9][JB], lamb[3][JB], Vb[9][JB];
            int fin[JB];
            for (int j = 0; j < JB; j++) {
                double Xs[9];
                fin[j] = j < nb;
                for (int i = 0; i < 3; i++)
                    for (int k = 0; k < 3; k++) {
                        Xs[3 * i + k] = 0.5 * (X[3 * i + k][j] + X[3 * k + i][j]);
                        if (!isfinite(Xs[3 * i + k])) fin[j] = 0;
                    }
                if (j < nb) memcpy(tid + 9 * (e0 + j), Xs, sizeof Xs);
                for (int i = 0; i < 9; i++) Xb[i][j] = fin[j] ? Xs[i] : 0.0;
            }
            jacobi3_block(Xb, lamb, want_tidal > 1 ? Vb : NULL);
            for (Py_ssize_t j = 0; j < nb; j++) {
                Py_ssize_t e = e0 + j;
                int keepv = fin[j] && want_tidal > 1;
                for (int i = 0; i < 3; i++) eig[3 * e + i] = fin[j] ? lamb[i][j] : NAN;
                for (int i = 0; i < 9; i++) vec[9 * e + i] = keepv ? Vb[i][j] : NAN;
            }
        }
    }
    Py_END_ALLOW_THREADS
    release(&bufs);
    Py_RETURN_NONE;
bad:
    PyErr_SetString(PyExc_ValueError, "frame: index table out of range");
fail:
    release(&bufs);
    return NULL;
}

/* observers(n, k, E (N,16), V (N,k,3), out (N,k,4)): the coordinate components
 * of n + v for k frame vectors v per event (pointwise._to_coordinates):
 * out[e,j,mu] = (v0 E[e,1,mu] + v1 E[e,2,mu] + v2 E[e,3,mu]) + E[e,0,mu]. */
WIDE static PyObject *py_observers(PyObject *self, PyObject *args)
{
    PyObject *oE, *oV, *oO;
    Py_ssize_t n, k;
    Buffers bufs = {.n = 0};
    if (!PyArg_ParseTuple(args, "nnOOO", &n, &k, &oE, &oV, &oO))
        return NULL;
    if (n < 0 || k < 0) { PyErr_SetString(PyExc_ValueError, "n, k < 0"); return NULL; }
    GETD(E, oE, 16 * n, 0);
    GETD(V, oV, 3 * k * n, 0);
    GETD(out, oO, 4 * k * n, 1);
    Py_BEGIN_ALLOW_THREADS
    for (Py_ssize_t e = 0; e < n; e++) {
        const double *Ee = E + 16 * e;
        for (Py_ssize_t j = 0; j < k; j++) {
            const double *v = V + 3 * (k * e + j);
            double *o = out + 4 * (k * e + j);
            for (int mu = 0; mu < 4; mu++)
                o[mu] = (v[0] * Ee[4 + mu] + v[1] * Ee[8 + mu] + v[2] * Ee[12 + mu]) + Ee[mu];
        }
    }
    Py_END_ALLOW_THREADS
    release(&bufs);
    Py_RETURN_NONE;
fail:
    release(&bufs);
    return NULL;
}

/* ------------------------------------------------------------ Hawking-Ellis screen */
/* Eigenvalues of a real 4x4 matrix: Householder reduction to Hessenberg form,
 * then the Francis double-shift QR iteration in real arithmetic, deflating
 * 1x1 and 2x2 blocks (the EISPACK routine hqr of Wilkinson & Reinsch,
 * Handbook for Automatic Computation II, 1971; Golub & Van Loan, Matrix
 * Computations, 4th ed. §7.5 — from memory). Its exceptional shift comes
 * every 10 iterations instead of only after 10 and 20: with two complex
 * pairs the plain iteration can cycle (one random Hessenberg matrix in 20 000
 * did, 30 iterations without a deflation). Backward stable; used only to
 * screen clear cases (below). Eigenvalues in wr + i wi, complex pairs
 * adjacent with the positive imaginary part first. Returns 0 if it did not
 * converge in 60 iterations per eigenvalue (the screen then defers). */
static int eig4(const double *a, double *wr, double *wi)
{
    double h[4][4];
    for (int i = 0; i < 4; i++)
        for (int j = 0; j < 4; j++) h[i][j] = a[4 * i + j];
    for (int k = 0; k < 2; k++) {               /* Householder on column k below k+1 */
        double x[4], nx = 0.0;
        for (int i = k + 1; i < 4; i++) { x[i] = h[i][k]; nx += x[i] * x[i]; }
        nx = sqrt(nx);
        if (nx == 0.0) continue;
        double alpha = x[k + 1] > 0 ? -nx : nx;
        x[k + 1] -= alpha;
        double vn = 0.0;
        for (int i = k + 1; i < 4; i++) vn += x[i] * x[i];
        if (vn == 0.0) continue;
        for (int j = 0; j < 4; j++) {           /* H <- (I - 2vv^T/vn) H */
            double d = 0.0;
            for (int i = k + 1; i < 4; i++) d += x[i] * h[i][j];
            d *= 2.0 / vn;
            for (int i = k + 1; i < 4; i++) h[i][j] -= d * x[i];
        }
        for (int i = 0; i < 4; i++) {           /* H <- H (I - 2vv^T/vn) */
            double d = 0.0;
            for (int j = k + 1; j < 4; j++) d += h[i][j] * x[j];
            d *= 2.0 / vn;
            for (int j = k + 1; j < 4; j++) h[i][j] -= d * x[j];
        }
        for (int i = k + 2; i < 4; i++) h[i][k] = 0.0;
    }
    double norm = 0.0;
    for (int i = 0; i < 4; i++)
        for (int j = i > 0 ? i - 1 : 0; j < 4; j++) norm += fabs(h[i][j]);
    int nn = 3, its = 0;
    double t = 0.0;                              /* sum of the exceptional shifts */
    while (nn >= 0) {
        int l;                                   /* start of the unreduced block */
        for (l = nn; l >= 1; l--) {
            double s = fabs(h[l - 1][l - 1]) + fabs(h[l][l]);
            if (s == 0.0) s = norm;
            if (fabs(h[l][l - 1]) <= EPS * s) { h[l][l - 1] = 0.0; break; }
        }
        double x = h[nn][nn];
        if (l == nn) {                           /* a 1x1 block */
            wr[nn] = x + t; wi[nn] = 0.0;
            nn--; its = 0;
            continue;
        }
        double y = h[nn - 1][nn - 1], w = h[nn][nn - 1] * h[nn - 1][nn];
        if (l == nn - 1) {                       /* a 2x2 block: its two eigenvalues */
            double p = 0.5 * (y - x), q = p * p + w, z = sqrt(fabs(q));
            x += t;
            if (q >= 0.0) {
                z = p + copysign(z, p);
                wr[nn - 1] = wr[nn] = x + z;
                if (z != 0.0) wr[nn] = x - w / z;
                wi[nn - 1] = wi[nn] = 0.0;
            } else {
                wr[nn - 1] = wr[nn] = x + p;
                wi[nn - 1] = z; wi[nn] = -z;
            }
            nn -= 2; its = 0;
            continue;
        }
        if (its == 60) return 0;
        if (its > 0 && its % 10 == 0) {          /* exceptional shift */
            t += x;
            for (int i = 0; i <= nn; i++) h[i][i] -= x;
            double s = fabs(h[nn][nn - 1]) + fabs(h[nn - 1][nn - 2]);
            x = y = 0.75 * s;
            w = -0.4375 * s * s;
        }
        its++;
        /* the double shift's first column, started where two consecutive
         * subdiagonal entries are small enough */
        int m;
        double p = 0.0, q = 0.0, r = 0.0, z;
        for (m = nn - 2; m >= l; m--) {
            z = h[m][m];
            double rr = x - z, ss = y - z;
            p = (rr * ss - w) / h[m + 1][m] + h[m][m + 1];
            q = h[m + 1][m + 1] - z - rr - ss;
            r = h[m + 2][m + 1];
            double sc = fabs(p) + fabs(q) + fabs(r);
            p /= sc; q /= sc; r /= sc;
            if (m == l) break;
            double u = fabs(h[m][m - 1]) * (fabs(q) + fabs(r));
            double v = fabs(p) * (fabs(h[m - 1][m - 1]) + fabs(z) + fabs(h[m + 1][m + 1]));
            if (u <= EPS * v) break;
        }
        for (int i = m + 2; i <= nn; i++) {
            h[i][i - 2] = 0.0;
            if (i != m + 2) h[i][i - 3] = 0.0;
        }
        for (int k = m; k <= nn - 1; k++) {      /* chase the bulge */
            if (k != m) {
                p = h[k][k - 1];
                q = h[k + 1][k - 1];
                r = k != nn - 1 ? h[k + 2][k - 1] : 0.0;
                x = fabs(p) + fabs(q) + fabs(r);
                if (x != 0.0) { p /= x; q /= x; r /= x; }
            }
            double s = copysign(sqrt(p * p + q * q + r * r), p);
            if (s == 0.0) continue;
            if (k == m) {
                if (l != m) h[k][k - 1] = -h[k][k - 1];
            } else {
                h[k][k - 1] = -s * x;
            }
            p += s;
            x = p / s; y = q / s; z = r / s;
            q /= p; r /= p;
            for (int j = k; j <= nn; j++) {      /* reflector on rows k..k+2 */
                p = h[k][j] + q * h[k + 1][j];
                if (k != nn - 1) { p += r * h[k + 2][j]; h[k + 2][j] -= p * z; }
                h[k + 1][j] -= p * y;
                h[k][j] -= p * x;
            }
            int top = nn < k + 3 ? nn : k + 3;
            for (int i = l; i <= top; i++) {     /* and on columns k..k+2 */
                p = x * h[i][k] + y * h[i][k + 1];
                if (k != nn - 1) { p += z * h[i][k + 2]; h[i][k + 2] -= p * r; }
                h[i][k + 1] -= p * q;
                h[i][k] -= p;
            }
        }
    }
    return 1;
}

/* eigvals4(T (N,16), out (N,8) float, ok (N,) float): eig4 of each matrix,
 * out = (wr0..wr3, wi0..wi3); for the tests, which compare it with LAPACK. */
static PyObject *py_eigvals4(PyObject *self, PyObject *args)
{
    PyObject *oT, *oO, *oK;
    Py_ssize_t n;
    Buffers bufs = {.n = 0};
    if (!PyArg_ParseTuple(args, "nOOO", &n, &oT, &oO, &oK))
        return NULL;
    if (n < 0) { PyErr_SetString(PyExc_ValueError, "n < 0"); return NULL; }
    GETD(T, oT, 16 * n, 0);
    GETD(out, oO, 8 * n, 1);
    GETD(ok, oK, n, 1);
    for (Py_ssize_t e = 0; e < n; e++)
        ok[e] = eig4(T + 16 * e, out + 8 * e, out + 8 * e + 4);
    release(&bufs);
    Py_RETURN_NONE;
fail:
    release(&bufs);
    return NULL;
}

/* he_screen(T (N,16) symmetrised, tol (N,), code out (N,) float):
 * 0 vacuum; 1 type I or 4 type IV where no subset of the eigenvalues of
 * M = eta T / s can be a candidate cluster of auditor.conditions.hawking_ellis
 * (tested leniently, below); -1 where the full classification must decide. */
static PyObject *py_he_screen(PyObject *self, PyObject *args)
{
    PyObject *oT, *oTol, *oC;
    Py_ssize_t n;
    double k_iv, c_split;
    Buffers bufs = {.n = 0};
    if (!PyArg_ParseTuple(args, "nOOOdd", &n, &oT, &oTol, &oC, &k_iv, &c_split))
        return NULL;
    if (n < 0) { PyErr_SetString(PyExc_ValueError, "n < 0"); return NULL; }
    GETD(T, oT, 16 * n, 0);
    GETD(tol, oTol, n, 0);
    GETD(code, oC, n, 1);
    Py_BEGIN_ALLOW_THREADS
    for (Py_ssize_t e = 0; e < n; e++) {
        const double *Te = T + 16 * e;
        double s = 0.0;
        for (int i = 0; i < 16; i++) if (fabs(Te[i]) > s) s = fabs(Te[i]);
        if (s <= tol[e]) { code[e] = 0; continue; }
        double Mh[16];
        for (int i = 0; i < 4; i++)
            for (int j = 0; j < 4; j++) Mh[4 * i + j] = (i == 0 ? -1.0 : 1.0) * Te[4 * i + j] / s;
        double delta = tol[e] / s;
        if (delta < 4.0 * EPS) delta = 4.0 * EPS;
        double complex lam[4];
        {
            double wr[4], wi[4];
            if (!eig4(Mh, wr, wi)) { code[e] = -1; continue; }
            for (int i = 0; i < 4; i++) lam[i] = wr[i] + I * wi[i];
        }
        /* The candidate test of hawking_ellis._cluster_metrics on all 11
         * subsets of 2, 3 or 4 eigenvalues, made lenient (thresholds doubled,
         * spreads lowered by 1e-9; the cluster-gap condition, which only
         * removes candidates, left out), so that no subset the full
         * classification could examine passes here unnoticed. */
        double imax = 0.0;
        for (int i = 0; i < 4; i++)
            if (fabs(cimag(lam[i])) > imax) imax = fabs(cimag(lam[i]));
        /* A clear complex pair (|Im| above twice the type IV threshold, the
         * other two eigenvalues real to within a quarter of it): the type is IV
         * whatever those two do. They belong to the orthogonal complement of
         * the pair's invariant plane, which is spacelike, and M, symmetric
         * there, is diagonalisable (Hawking & Ellis 1973 §4.3 — from memory):
         * a cluster of them is no Jordan block, so only clusters that involve
         * the pair could matter, and those are tested below. */
        int skip_mask = 0;
        {
            int c1 = -1, c2 = -1;
            for (int i = 0; i < 4; i++)
                if (fabs(cimag(lam[i])) > 2.0 * k_iv * delta) { if (c1 < 0) c1 = i; else c2 = i; }
            int others = 0, real_others = 1;
            for (int i = 0; i < 4; i++)
                if (i != c1 && i != c2) {
                    others |= 1 << i;
                    if (!(fabs(cimag(lam[i])) < 0.25 * k_iv * delta)) real_others = 0;
                }
            if (c1 >= 0 && c2 >= 0 && real_others && cimag(lam[c1]) * cimag(lam[c2]) < 0)
                skip_mask = others;
        }
        int cand = 0;
        for (int mask = 3; mask < 16 && !cand; mask++) {
            if (mask == skip_mask) continue;
            int m = __builtin_popcount(mask);
            if (m < 2) continue;
            double cr = 0.0, d2 = 0.0;
            for (int i = 0; i < 4; i++) if (mask >> i & 1) cr += creal(lam[i]);
            cr /= m;
            for (int i = 0; i < 4; i++)
                if (mask >> i & 1) {
                    double x = creal(lam[i]) - cr, y = cimag(lam[i]);
                    if (x * x + y * y > d2) d2 = x * x + y * y;
                }
            double d = sqrt(d2);
            d = d > 1e-9 ? d - 1e-9 : 0.0;
            if (d * d <= 2.0 * c_split * delta * 8.0) cand = 1;
            if (m >= 3 && d * d * d <= 2.0 * c_split * delta * 64.0) cand = 1;
        }
        if (cand) { code[e] = -1; continue; }
        /* No cluster: type IV iff an imaginary part exceeds K_IV delta, decided
         * here only with a factor 2 to spare either way. */
        if (imax > 2.0 * k_iv * delta) code[e] = 4;
        else if (imax < 0.5 * k_iv * delta) code[e] = 1;
        else code[e] = -1;
    }
    Py_END_ALLOW_THREADS
    release(&bufs);
    Py_RETURN_NONE;
fail:
    release(&bufs);
    return NULL;
}

/* ------------------------------------------------------------ metric screen */
/* gscreen(rows (150,N), gidx (16), rtol, flags out (N,), crow (150)):
 * 1 if g is not finite; otherwise 2 if a derivative is not finite, plus 4 if
 * g is degenerate (smallest |eigenvalue| <= rtol * largest) or 8 if it is not
 * Lorentzian (not exactly one negative eigenvalue); 0 when all is well.
 * Eigenvalues by cyclic Jacobi, or read off the diagonal where that decides
 * (below); geometry.points checks the same with numpy.linalg.eigvalsh.
 * crow: as for curvature (a constant row is finite and is not read). */
WIDE static PyObject *py_gscreen(PyObject *self, PyObject *args)
{
    PyObject *oR, *oI, *oF;
    Py_ssize_t n;
    double rtol;
    Buffers bufs = {.n = 0};
    PyObject *oC;
    if (!PyArg_ParseTuple(args, "nOOdOO", &n, &oR, &oI, &rtol, &oF, &oC))
        return NULL;
    if (n < 0) { PyErr_SetString(PyExc_ValueError, "n < 0"); return NULL; }
    GETD(rows, oR, 150 * n, 0);
    GETD(crow, oC, 150, 0);
    GETI(gidx, oI, 16);
    GETD(flags, oF, n, 1);
    for (int i = 0; i < 16; i++) if (gidx[i] < 0 || gidx[i] >= 10) {
        PyErr_SetString(PyExc_ValueError, "gscreen: index table out of range");
        goto fail;
    }
    Py_BEGIN_ALLOW_THREADS
    /* x - x is 0 for a finite x and NaN otherwise: summed row by row (long
     * streams, a loop without branches that the compiler vectorises), the
     * sum is 0 exactly where every derivative is finite. */
    for (Py_ssize_t e = 0; e < n; e++) flags[e] = 0.0;
    for (int r = 10; r < 150; r++) {
        if (crow[r] == crow[r]) continue;        /* a constant row: finite, not read */
        const double *row = rows + (Py_ssize_t)r * n;
        for (Py_ssize_t e = 0; e < n; e++)
            flags[e] += row[e] - row[e];
    }
    for (Py_ssize_t e = 0; e < n; e++)
        flags[e] = flags[e] == 0.0 ? 0.0 : 2.0;
    for (Py_ssize_t e = 0; e < n; e++) {
        double g[16], w[4];
        int fin = 1;
        for (int i = 0; i < 16; i++) {
            g[i] = rows[gidx[i] * n + e];
            if (!isfinite(g[i])) fin = 0;
        }
        if (!fin) { flags[e] = 1.0; continue; }
        /* Nearly diagonal g (most charts): the eigenvalues lie within the
         * off-diagonal part's norm E of the diagonal entries (Weyl's inequality;
         * E = Frobenius norm of the off-diagonal entries >= their 2-norm). If E
         * is below half the smallest |g_aa| and the degeneracy test passes with
         * E to spare, the diagonal decides both tests exactly as the
         * eigenvalues would; otherwise they are computed. */
        {
            double off = 0.0, dmin = INFINITY, dmax = 0.0;
            int dneg = 0;
            for (int i = 0; i < 4; i++) {
                double d = fabs(g[5 * i]);
                if (d < dmin) dmin = d;
                if (d > dmax) dmax = d;
                if (g[5 * i] < 0) dneg++;
                for (int j = i + 1; j < 4; j++) off += 2.0 * g[4 * i + j] * g[4 * i + j];
            }
            off = sqrt(off);
            if (off <= 0.5 * dmin && dmin - off > rtol * (dmax + off)) {
                if (dneg != 1) flags[e] += 8.0;
                continue;
            }
        }
        jacobi(g, 4, w, NULL);
        double big = 0.0, small = INFINITY;
        int neg = 0;
        for (int i = 0; i < 4; i++) {
            double a = fabs(w[i]);
            if (a > big) big = a;
            if (a < small) small = a;
            if (w[i] < 0) neg++;
        }
        if (small <= rtol * big) flags[e] += 4.0;
        else if (neg != 1) flags[e] += 8.0;
    }
    Py_END_ALLOW_THREADS
    release(&bufs);
    Py_RETURN_NONE;
fail:
    release(&bufs);
    return NULL;
}

/* ------------------------------------------------------------ connected regions */
static int uf_find(int *parent, int x)
{
    while (parent[x] != x) {
        parent[x] = parent[parent[x]];
        x = parent[x];
    }
    return x;
}

/* label(mask (uint8, C order), shape (ndim <= 8, int64), labels out (int32)) -> count
 * Connected components of the true cells with face connectivity, numbered
 * 1, 2, ... in order of first appearance in C order: the output of
 * scipy.ndimage.label with its default structure (the reference the tests
 * compare with). Two passes with union-find (Rosenfeld & Pfaltz 1966; from
 * memory). */
static PyObject *py_label(PyObject *self, PyObject *args)
{
    PyObject *oM, *oS, *oL;
    Buffers bufs = {.n = 0};
    if (!PyArg_ParseTuple(args, "OOO", &oM, &oS, &oL))
        return NULL;
    Py_buffer *sv = &bufs.view[0];
    if (PyObject_GetBuffer(oS, sv, PyBUF_C_CONTIGUOUS) < 0) return NULL;
    bufs.n = 1;
    Py_ssize_t ndim = sv->len / 8;
    if (ndim < 1 || ndim > 8) { PyErr_SetString(PyExc_ValueError, "label: 1 to 8 axes"); goto fail; }
    const long long *shape = (const long long *)sv->buf;
    Py_ssize_t n = 1, stride[8];
    for (Py_ssize_t k = ndim - 1; k >= 0; k--) {
        if (shape[k] < 1) { PyErr_SetString(PyExc_ValueError, "label: empty axis"); goto fail; }
        stride[k] = n;
        if (n > PY_SSIZE_T_MAX / shape[k]) { PyErr_NoMemory(); goto fail; }
        n *= shape[k];
    }
    if (n > 2147483647LL) { PyErr_SetString(PyExc_ValueError, "label: too many cells"); goto fail; }
    const unsigned char *mask = (const unsigned char *)get(&bufs, oM, n, 1, 0, "mask");
    if (!mask) goto fail;
    int *lab = (int *)get(&bufs, oL, n, 4, 1, "labels");
    if (!lab) goto fail;
    int *parent = (int *)PyMem_RawMalloc(((size_t)n / 2 + 2) * sizeof(int));
    if (!parent) { PyErr_NoMemory(); goto fail; }
    int next = 1, count = 0;
    Py_BEGIN_ALLOW_THREADS
    parent[0] = 0;
    long long idx[8] = {0};
    for (Py_ssize_t i = 0; i < n; i++) {
        if (!mask[i]) {
            lab[i] = 0;
        } else {
            int best = 0, seen[8], ns = 0;
            for (Py_ssize_t k = 0; k < ndim; k++) {
                if (idx[k] == 0) continue;
                int l = lab[i - stride[k]];
                if (l) {
                    l = uf_find(parent, l);
                    seen[ns++] = l;
                    if (!best || l < best) best = l;
                }
            }
            if (!best) {
                best = next++;
                parent[best] = best;
            } else {
                for (int q = 0; q < ns; q++) parent[seen[q]] = best;
            }
            lab[i] = best;
        }
        for (Py_ssize_t k = ndim - 1; k >= 0; k--) {      /* advance the multi-index */
            if (++idx[k] < shape[k]) break;
            idx[k] = 0;
        }
    }
    /* final numbers in order of first appearance; parent[] of a root becomes
     * minus its final number */
    for (Py_ssize_t i = 0; i < n; i++) {
        int l = lab[i];
        if (!l) continue;
        int r = l;
        while (parent[r] > 0 && parent[r] != r) r = parent[r];
        if (parent[r] == r) parent[r] = -(++count);
        lab[i] = -parent[r];
    }
    Py_END_ALLOW_THREADS
    PyMem_RawFree(parent);
    release(&bufs);
    return PyLong_FromLong(count);
fail:
    release(&bufs);
    return NULL;
}

/* ------------------------------------------------------------ sampled observers */
/* min over k, v of x00 + 2 v x0.s_k + v^2 s_k^T X s_k (conditions.sampled._ball_samples) */
static double ball_samples(double x00, const double *xb, const double *X, const double *dirs,
                           Py_ssize_t K, const double *v, Py_ssize_t V)
{
    const double *dx = dirs, *dy = dirs + K, *dz = dirs + 2 * K;
    double best = INFINITY;
    for (Py_ssize_t k = 0; k < K; k++) {
        double s0 = dx[k], s1 = dy[k], s2 = dz[k];
        double lin = xb[0] * s0 + xb[1] * s1 + xb[2] * s2;
        double q = (s0 * X[0] + s1 * X[3] + s2 * X[6]) * s0
                 + (s0 * X[1] + s1 * X[4] + s2 * X[7]) * s1
                 + (s0 * X[2] + s1 * X[5] + s2 * X[8]) * s2;
        for (Py_ssize_t j = 0; j < V; j++) {
            double val = x00 + 2.0 * v[j] * lin + (v[j] * v[j]) * q;
            if (val < best) best = val;
        }
    }
    return best;
}

/* sampled(T (N,16) symmetrised, dirs (3,K), speeds (V), ddirs (3,K2), out (N,4)):
 * the sampled NEC, WEC, SEC and DEC minima of conditions.sampled.sampled_margins. */
WIDE static PyObject *py_sampled(PyObject *self, PyObject *args)
{
    PyObject *oT, *oD, *oV, *oD2, *oOut;
    Py_ssize_t n, K, V, K2;
    Buffers bufs = {.n = 0};
    if (!PyArg_ParseTuple(args, "nOnOnOnOO", &n, &oT, &K, &oD, &V, &oV, &K2, &oD2, &oOut))
        return NULL;
    if (n < 0 || K < 1 || V < 1 || K2 < 1) {
        PyErr_SetString(PyExc_ValueError, "sampled: bad sizes");
        return NULL;
    }
    GETD(T, oT, 16 * n, 0);
    GETD(dirs, oD, 3 * K, 0);
    GETD(speeds, oV, V, 0);
    GETD(d2, oD2, 3 * K2, 0);
    GETD(out, oOut, 4 * n, 1);
    double *lin2 = (double *)PyMem_RawMalloc((size_t)K2 * 4 * sizeof(double));
    if (!lin2) { PyErr_NoMemory(); goto fail; }
    double one = 1.0;
    Py_BEGIN_ALLOW_THREADS
    double *ax = lin2 + K2, *ay = lin2 + 2 * K2, *az = lin2 + 3 * K2;
    const double *ex = d2, *ey = d2 + K2, *ez = d2 + 2 * K2;
    for (Py_ssize_t e = 0; e < n; e++) {
        const double *Te = T + 16 * e;
        double rho = Te[0], b[3] = {Te[1], Te[2], Te[3]}, A[9], X[9];
        for (int i = 0; i < 3; i++)
            for (int j = 0; j < 3; j++) A[3 * i + j] = Te[4 * (i + 1) + j + 1];
        double tr = -Te[0] + Te[5] + Te[10] + Te[15];
        memcpy(X, A, sizeof A);
        for (int i = 0; i < 3; i++) X[4 * i] = A[4 * i] - 0.5 * tr;
        double *o = out + 4 * e;
        o[0] = ball_samples(rho, b, A, dirs, K, &one, 1);
        o[1] = ball_samples(rho, b, A, dirs, K, speeds, V);
        o[2] = ball_samples(rho + 0.5 * tr, b, X, dirs, K, speeds, V);
        /* DEC over ordered pairs: rho + b.s_k + b.s_l + s_k^T A s_l */
        for (Py_ssize_t l = 0; l < K2; l++) {
            lin2[l] = b[0] * ex[l] + b[1] * ey[l] + b[2] * ez[l];
            ax[l] = A[0] * ex[l] + A[1] * ey[l] + A[2] * ez[l];
            ay[l] = A[3] * ex[l] + A[4] * ey[l] + A[5] * ez[l];
            az[l] = A[6] * ex[l] + A[7] * ey[l] + A[8] * ez[l];
        }
        double best = INFINITY;
        for (Py_ssize_t k = 0; k < K2; k++) {
            double sx = ex[k], sy = ey[k], sz = ez[k], lk = lin2[k];
            double m = INFINITY;
            for (Py_ssize_t l = 0; l < K2; l++) {
                double val = (sx * ax[l] + sy * ay[l] + sz * az[l]) + lk + lin2[l];
                m = val < m ? val : m;
            }
            if (m < best) best = m;
        }
        o[3] = rho + best;
    }
    Py_END_ALLOW_THREADS
    PyMem_RawFree(lin2);
    release(&bufs);
    Py_RETURN_NONE;
fail:
    release(&bufs);
    return NULL;
}

/* ------------------------------------------------------------ exact sums */
/* exact_bins(n, values (N,), groups (N,) int64 or None, hi, lo (G*span,), G,
 * offset, span) -> count: the bin sums of auditor.sums.ExactSum._add for
 * finite values (the caller removes the others), zeros skipped. Each x is
 * mant * 2^exp (frexp), H = floor(mant * 2^27), L = mant * 2^53 - H * 2^26,
 * added to bin (group * span + exp + offset): the same operations as the
 * NumPy code, so the same exact bin sums. Returns the number of values
 * binned. */
static PyObject *py_exact_bins(PyObject *self, PyObject *args)
{
    PyObject *oV, *oG, *oH, *oL;
    Py_ssize_t n, G, offset, span;
    Buffers bufs = {.n = 0};
    if (!PyArg_ParseTuple(args, "nOOOOnnn", &n, &oV, &oG, &oH, &oL, &G, &offset, &span))
        return NULL;
    if (n < 0 || G < 1 || span < 1 || offset < 1100 || offset + 1024 >= span) {
        PyErr_SetString(PyExc_ValueError, "exact_bins: bad sizes");
        return NULL;
    }
    GETD(v, oV, n, 0);
    const long long *g = NULL;
    if (oG != Py_None) {
        g = (const long long *)get(&bufs, oG, n, 8, 0, "groups");
        if (!g) goto fail;
    }
    GETD(hi, oH, G * span, 1);
    GETD(lo, oL, G * span, 1);
    for (Py_ssize_t i = 0; g && i < n; i++)
        if (g[i] < 0 || g[i] >= G) {
            PyErr_SetString(PyExc_ValueError, "exact_bins: group out of range");
            goto fail;
        }
    for (Py_ssize_t i = 0; i < n; i++)
        if (!isfinite(v[i])) {
            PyErr_SetString(PyExc_ValueError, "exact_bins: non-finite value");
            goto fail;
        }
    Py_ssize_t count = 0;
    Py_BEGIN_ALLOW_THREADS
    for (Py_ssize_t i = 0; i < n; i++) {
        if (v[i] == 0.0) continue;
        int e;
        double mant = frexp(v[i], &e);                /* e in [-1073, 1024] */
        double h = floor(mant * 134217728.0);          /* 2^27 */
        double l = mant * 9007199254740992.0 - h * 67108864.0;   /* 2^53, 2^26 */
        Py_ssize_t k = (g ? (Py_ssize_t)g[i] * span : 0) + e + offset;
        hi[k] += h;
        lo[k] += l;
        count++;
    }
    Py_END_ALLOW_THREADS
    release(&bufs);
    return PyLong_FromSsize_t(count);
fail:
    release(&bufs);
    return NULL;
}

/* ------------------------------------------------------------ module */
static PyMethodDef methods[] = {
    {"curvature", py_curvature, METH_VARARGS, "Curvature assembly, event by event."},
    {"margins", py_margins, METH_VARARGS, "NEC sphere and WEC/SEC balls, event by event."},
    {"dec", py_dec, METH_VARARGS, "DEC search, event by event."},
    {"he_screen", py_he_screen, METH_VARARGS, "Hawking-Ellis type of clear cases, event by event."},
    {"sampled", py_sampled, METH_VARARGS, "Sampled-observer minima, event by event."},
    {"label", py_label, METH_VARARGS, "Connected regions (face connectivity)."},
    {"gscreen", py_gscreen, METH_VARARGS, "Finiteness and signature of g, event by event."},
    {"eulerian", py_eulerian, METH_VARARGS, "Eulerian tetrads, event by event."},
    {"frame", py_frame, METH_VARARGS, "Frame stress, round-off scale and tides, event by event."},
    {"observers", py_observers, METH_VARARGS, "Frame vectors n + v in coordinates, event by event."},
    {"eigvals4", py_eigvals4, METH_VARARGS, "Eigenvalues of real 4x4 matrices (for the tests)."},
    {"exact_bins", py_exact_bins, METH_VARARGS, "Bin sums of an exact summation."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {
    PyModuleDef_HEAD_INIT, "_native", "Compiled per-event loops of the audit.", -1, methods,
};

PyMODINIT_FUNC PyInit__native(void)
{
    return PyModule_Create(&module);
}
