/* FMI 2.0 co-simulation runtime of a block exported by wirestate.
 *
 * The model itself (matrices, signal maps, sampled controllers) is in wirestate_model.h,
 * generated at export; this file is the same for every exported model.
 *
 * Method. The continuous linear part dx/dt = A x + B u is advanced by the exact
 * zero-order hold over each communication step (inputs held): x <- Ad x + Bd u with
 * exp([[A, B], [0, 0]] h) = [[Ad, Bd], [0, I]] (C. F. Van Loan, IEEE Trans. Automatic
 * Control 23(3), 1978). The matrices for the default step were computed at export; any
 * other (sub-)step is computed here by scaling and squaring with a degree-14 Taylor
 * polynomial (see ws_zoh for the error bound) and kept in a small cache. Sampled
 * controllers run at their own period inside the step, with the sample-instant order of
 * wirestate's own simulator: blocks without direct feedthrough publish their held outputs
 * first, the others then sample in signal order, then the former update their state.
 *
 * Build: any C99 compiler, e.g.  cc -shared -fPIC -O2 -std=c99 -ffp-contract=off
 *        -I<FMI 2.0 headers> wirestate_fmu.c -o <model>.so -lm
 * (no contraction into fused multiply-adds, so the controller arithmetic rounds like
 * wirestate's Python simulator).
 *
 * No heap allocation happens in fmi2DoStep: every array lives in the instance, allocated
 * once by fmi2Instantiate through the environment's allocateMemory callback.
 */
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#include "fmi2Functions.h"
#include "wirestate_model.h"

#define WS_MAX(a, b) ((a) > (b) ? (a) : (b))
#define WS_N1(n) WS_MAX((n), 1)
#define WS_NAUG (WS_NX + WS_NLIN)

enum { WS_INSTANTIATED = 1, WS_INITIALIZATION, WS_STEPPING, WS_TERMINATED, WS_ERROR };
enum { WS_LOG_ERROR = 0, WS_LOG_WARNING, WS_LOG_ALL, WS_N_LOG };
static const char *ws_log_names[WS_N_LOG] = {"logStatusError", "logStatusWarning", "logAll"};

/* everything that get/set FMU state and serialisation save: plain doubles and integers */
typedef struct {
    double time;
    double t_start;
    double x[WS_N1(WS_NX)];      /* continuous states */
    double sx[WS_N1(WS_NSX)];    /* sampled-block states (before a pending sample) */
    double held[WS_N1(WS_NSY)];  /* held sampled outputs (before a pending sample) */
    double u[WS_N1(WS_NU)];      /* inputs, held over the step */
    long long k[WS_N1(WS_NSB)];  /* next sample index of each sampled block */
} ws_state;

typedef struct {
    double dt;
    double Ad[WS_N1(WS_NX * WS_NX)];
    double Bd[WS_N1(WS_NX * WS_NLIN)];
} ws_cached;

typedef struct {
    ws_state s;
    int mode;
    int logging;
    int categories[WS_N_LOG];
    char *name;
    fmi2CallbackFunctions cb;
    /* values after the sample pending at s.time (outputs read them) */
    int post_valid;
    double post_sx[WS_N1(WS_NSX)];
    double post_held[WS_N1(WS_NSY)];
    double y[WS_N1(WS_NY)];
    /* scratch */
    double ulin[WS_N1(WS_NLIN)];
    double ylin[WS_N1(WS_NLOUT)];
    double xnext[WS_N1(WS_NX)];
    double bin[WS_N1(WS_MAXBIN)];
    double bnext[WS_N1(WS_MAXBX)];
    double bout[WS_N1(WS_MAXBY)];
    /* matrix exponential workspace and cache */
    double wM[WS_N1(WS_NAUG * WS_NAUG)];
    double wT[WS_N1(WS_NAUG * WS_NAUG)];
    double wP[WS_N1(WS_NAUG * WS_NAUG)];
    double wd[WS_N1(WS_NAUG)];
    ws_cached cache[WS_CACHE_SIZE];
    int n_cached;
    int next_slot;
    char message[512];
} ws_instance;

typedef struct {
    char magic[8];
    char guid[48];
    unsigned long long size;
} ws_header;

/* -- logging ------------------------------------------------------------------------- */

static void ws_log(ws_instance *c, fmi2Status status, const char *fmt, ...) {
    int category = status >= fmi2Error ? WS_LOG_ERROR
                   : status >= fmi2Warning ? WS_LOG_WARNING : WS_LOG_ALL;
    va_list args;
    if (c == NULL || c->cb.logger == NULL) return;
    /* errors are always reported; debug messages only when logging is on */
    if (category != WS_LOG_ERROR && !(c->logging && c->categories[category])) return;
    va_start(args, fmt);
    vsnprintf(c->message, sizeof c->message, fmt, args);
    va_end(args);
    c->cb.logger(c->cb.componentEnvironment, c->name, status, ws_log_names[category], "%s",
                 c->message);
}

static fmi2Status ws_fail(ws_instance *c, const char *where, const char *what) {
    ws_log(c, fmi2Error, "%s: %s", where, what);
    return fmi2Error;
}

static int ws_allowed(ws_instance *c, const char *where, int mask) {
    if (c == NULL) return 0;
    if (!((1 << c->mode) & mask)) {
        ws_log(c, fmi2Error, "%s: not allowed in the present state of the FMU", where);
        return 0;
    }
    return 1;
}

#define M_INST (1 << WS_INSTANTIATED)
#define M_INIT (1 << WS_INITIALIZATION)
#define M_STEP (1 << WS_STEPPING)
#define M_TERM (1 << WS_TERMINATED)
#define M_ERR (1 << WS_ERROR)
#define M_ANY (M_INST | M_INIT | M_STEP | M_TERM | M_ERR)

/* -- exact zero-order hold ----------------------------------------------------------- */

static void ws_matmul(int n, const double *X, const double *Y, double *Z) {
    int i, j, l;
    for (i = 0; i < n; ++i) {
        for (j = 0; j < n; ++j) {
            double acc = 0.0;
            for (l = 0; l < n; ++l) acc += X[i * n + l] * Y[l * n + j];
            Z[i * n + j] = acc;
        }
    }
}

static double ws_norm1(int n, const double *X) {
    double norm = 0.0;
    int i, j;
    for (j = 0; j < n; ++j) {
        double col = 0.0;
        for (i = 0; i < n; ++i) col += fabs(X[i * n + j]);
        if (col > norm) norm = col;
    }
    return norm;
}

/* Diagonal balancing of M by powers of two, D^-1 M D with row and column norms of each
 * index made alike (B. N. Parlett and C. Reinsch, Numer. Math. 13, 1969; used for the
 * matrix exponential by R. C. Ward, SIAM J. Numer. Anal. 14(4), 1977). Powers of two scale
 * without rounding, so exp(D^-1 M D) = D^-1 exp(M) D holds for the computed numbers too;
 * it evens out the mixed units of voltages and currents (a 50 ohm line puts factors of 50
 * and 1/50 in the 1-norm) and so the number of squarings and their error bound. */
static void ws_balance(int n, double *M, double *d) {
    int i, j, pass, changed = 1;
    for (i = 0; i < n; ++i) d[i] = 1.0;
    for (pass = 0; changed && pass < 100; ++pass) {
        changed = 0;
        for (i = 0; i < n; ++i) {
            double c = 0.0, r = 0.0, f = 1.0, g, total;
            for (j = 0; j < n; ++j) {
                if (j == i) continue;
                c += fabs(M[j * n + i]);
                r += fabs(M[i * n + j]);
            }
            if (c == 0.0 || r == 0.0) continue;
            g = r / 2.0;
            total = c + r;
            while (c < g) {
                f *= 2.0;
                c *= 2.0;
                r /= 2.0;
                g /= 2.0;
            }
            g = r * 2.0;
            while (c >= g) {
                f /= 2.0;
                c /= 2.0;
                r *= 2.0;
                g *= 2.0;
            }
            if ((c + r) < 0.95 * total) {
                changed = 1;
                d[i] *= f;
                for (j = 0; j < n; ++j) M[i * n + j] /= f; /* row i of D^-1 M */
                for (j = 0; j < n; ++j) M[j * n + i] *= f; /* column i of M D */
            }
        }
    }
}

/* Ad, Bd for the step dt: exp(M) with M = [[A, B], [0, 0]] dt, by balancing (ws_balance),
 * then scaling and squaring (N. J. Higham, Functions of Matrices, SIAM 2008, sec. 10.3):
 * the balanced M is scaled by 2^-s so that ||X||_1 <= 1/2, exp(X) is the Taylor polynomial
 * of degree 14 (Horner form), then squared s times, and the balancing is undone.
 *
 * Returns a bound on the error of the computed exp(M) in the 1-norm, relative to its
 * computed norm, from the standard model of floating-point arithmetic (u = 2^-53,
 * gamma_n = n u / (1 - n u) for a length-n inner product; N. J. Higham, Accuracy and
 * Stability of Numerical Algorithms, 2nd ed., SIAM 2002, sec. 3.5). With T_i the i-th
 * square of the balanced polynomial and e_i a bound on its absolute error:
 *   e_0 = tau + 2 e^(1/2) (gamma_n + 2 u), tau = ||X||^15 / 15! / (1 - ||X|| / 16)
 *       <= 2.4e-17 the Taylor truncation; each Horner step T = I + X T / k adds at most
 *       e^(1/2) (gamma_n + 2 u) and damps the earlier errors by ||X|| / k <= 1/2;
 *   e_(i+1) = (2 ||T_i|| + e_i) e_i + gamma_n ||T_i||^2, since T^2 - S^2 = T E + E S with
 *       ||S|| <= ||T|| + e, plus the rounding of the product;
 *   undoing the balancing multiplies the 1-norm error by at most max(d) / min(d).
 * The second-order term e_i^2 is kept (a bound, not a first-order estimate). It bounds the
 * exponential of M as rounded to doubles, and it grows like 2^s in the worst case, so it
 * is tight for short steps and pessimistic for steps many times the fastest time
 * constant. */
static double ws_zoh(ws_instance *c, double dt, double *Ad, double *Bd) {
    const int n = WS_NAUG;
    const double u = ldexp(1.0, -53);
    const double gamma = n * u / (1.0 - n * u);
    double *M = c->wM, *T = c->wT, *P = c->wP, *d = c->wd;
    double norm, error, normT, dmax = 0.0, dmin = 0.0;
    int i, j, k, s = 0;
    memset(M, 0, sizeof c->wM);
    for (i = 0; i < WS_NX; ++i) {
        for (j = 0; j < WS_NX; ++j) M[i * n + j] = ws_A[i * WS_NX + j] * dt;
        for (j = 0; j < WS_NLIN; ++j) M[i * n + WS_NX + j] = ws_B[i * WS_NLIN + j] * dt;
    }
    ws_balance(n, M, d);
    norm = ws_norm1(n, M);
    while (norm > 0.5 && s < 1000) {
        norm *= 0.5;
        ++s;
    }
    {
        const double scale = ldexp(1.0, -s);
        for (i = 0; i < n * n; ++i) M[i] *= scale;
    }
    /* T = I + X/14, then T = I + X T / k for k = 13 .. 1 */
    for (i = 0; i < n * n; ++i) T[i] = M[i] / 14.0;
    for (i = 0; i < n; ++i) T[i * n + i] += 1.0;
    for (k = 13; k >= 1; --k) {
        ws_matmul(n, M, T, P);
        for (i = 0; i < n * n; ++i) T[i] = P[i] / (double)k;
        for (i = 0; i < n; ++i) T[i * n + i] += 1.0;
    }
    norm = ws_norm1(n, M);
    error = pow(norm, 15) / 1307674368000.0 / (1.0 - norm / 16.0) +
            2.0 * exp(0.5) * (gamma + 2.0 * u);
    for (k = 0; k < s; ++k) {
        normT = ws_norm1(n, T) * (1.0 + gamma);
        error = (2.0 * normT + error) * error + gamma * normT * normT;
        ws_matmul(n, T, T, P);
        memcpy(T, P, sizeof(double) * n * n);
    }
    for (i = 0; i < n; ++i) {
        if (i == 0 || d[i] > dmax) dmax = d[i];
        if (i == 0 || d[i] < dmin) dmin = d[i];
        for (j = 0; j < n; ++j) T[i * n + j] *= d[i] / d[j]; /* D T D^-1, exact */
    }
    for (i = 0; i < WS_NX; ++i) {
        for (j = 0; j < WS_NX; ++j) Ad[i * WS_NX + j] = T[i * n + j];
        for (j = 0; j < WS_NLIN; ++j) Bd[i * WS_NLIN + j] = T[i * n + WS_NX + j];
    }
    normT = ws_norm1(n, T);
    error *= dmax / dmin;
    return normT > 0.0 ? error / normT : error;
}

static int ws_same_step(double a, double b) {
    /* steps equal to 1e-9 relative share their matrices: the master's step is often a
     * difference of two times, e.g. 3e-6 - 2e-6 != 1e-6 in binary */
    return fabs(a - b) <= 1e-9 * fabs(b);
}

static void ws_matrices(ws_instance *c, double dt, const double **Ad, const double **Bd) {
    int i;
    double bound;
    ws_cached *slot;
    if (ws_same_step(dt, WS_DEFAULT_STEP)) {
        *Ad = ws_Ad0;
        *Bd = ws_Bd0;
        return;
    }
    for (i = 0; i < c->n_cached; ++i) {
        if (ws_same_step(dt, c->cache[i].dt)) {
            *Ad = c->cache[i].Ad;
            *Bd = c->cache[i].Bd;
            return;
        }
    }
    slot = &c->cache[c->next_slot];
    c->next_slot = (c->next_slot + 1) % WS_CACHE_SIZE;
    if (c->n_cached < WS_CACHE_SIZE) ++c->n_cached;
    slot->dt = dt;
    bound = ws_zoh(c, dt, slot->Ad, slot->Bd);
    ws_log(c, fmi2OK, "zero-order hold matrices computed for a step of %.17g s; "
           "error bound %.3g (1-norm, relative)", dt, bound);
    *Ad = slot->Ad;
    *Bd = slot->Bd;
}

/* -- signals ------------------------------------------------------------------------- */

static void ws_linear_inputs(ws_instance *c, const double *held) {
    int j;
    for (j = 0; j < WS_NLIN; ++j)
        c->ulin[j] = ws_lin_in_kind[j] == 0 ? c->s.u[ws_lin_in_index[j]]
                                            : held[ws_lin_in_index[j]];
}

static double ws_linear_output(ws_instance *c, int row) {
    double a = 0.0, b = 0.0;
    int j;
    for (j = 0; j < WS_NX; ++j) a += ws_C[row * WS_N1(WS_NX) + j] * c->s.x[j];
    for (j = 0; j < WS_NLIN; ++j) b += ws_D[row * WS_N1(WS_NLIN) + j] * c->ulin[j];
    return a + b;
}

static void ws_advance(ws_instance *c, double dt, const double *held) {
    const double *Ad, *Bd;
    int i, j;
    if (WS_NX == 0 || dt <= 0.0) return;
    ws_matrices(c, dt, &Ad, &Bd);
    ws_linear_inputs(c, held);
    for (i = 0; i < WS_NX; ++i) {
        double a = 0.0, b = 0.0;
        for (j = 0; j < WS_NX; ++j) a += Ad[i * WS_NX + j] * c->s.x[j];
        for (j = 0; j < WS_NLIN; ++j) b += Bd[i * WS_N1(WS_NLIN) + j] * c->ulin[j];
        c->xnext[i] = a + b;
    }
    memcpy(c->s.x, c->xnext, sizeof(double) * WS_NX);
}

/* -- sampled blocks ------------------------------------------------------------------ */

/* One sample of a PI/PID: the command to hold and the next state (wirestate's
 * PIDController.sample, operation for operation). */
static double ws_pid(const ws_block *p, const double *x, double r, double y, double *nxt) {
    double e = r - y;
    double integral = x[0];
    double v = p->kp * e + integral;
    double w, u, inc;
    int i = 1;
    if (p->has_derivative) {
        double d = p->a * x[1] - p->b * (y - x[2]);
        v += d;
        nxt[1] = d;
        nxt[2] = y;
        i = 3;
    }
    w = (p->low > v) ? p->low : v;
    u = (p->high < w) ? p->high : w;
    inc = p->ki_ts * e;
    if (p->limited) {
        if (p->anti_windup == WS_BACK_CALCULATION) {
            inc += p->track * (u - v);
        } else if (p->anti_windup == WS_CONDITIONAL && u != v && (v - u) * e > 0) {
            inc = 0.0;
        }
    }
    nxt[0] = integral + inc;
    if (p->delay) {
        nxt[i] = u;
        return x[i];
    }
    return u;
}

/* outputs (into c->bout) and next state (into c->bnext) of block b for inputs c->bin */
static void ws_block_sample(ws_instance *c, int b, const double *sx) {
    const ws_block *p = &ws_blocks[b];
    const double *x = sx + p->x_off;
    if (p->type == WS_PID) {
        c->bout[0] = ws_pid(p, x, c->bin[0], c->bin[1], c->bnext);
    } else {
        const double *A = ws_pool + p->pool_off;
        const double *B = A + p->nx * p->nx;
        const double *C = B + p->nx * p->nin;
        const double *D = C + p->ny * p->nx;
        int i, j;
        for (i = 0; i < p->ny; ++i) {
            double a = 0.0, s = 0.0;
            for (j = 0; j < p->nx; ++j) a += C[i * p->nx + j] * x[j];
            for (j = 0; j < p->nin; ++j) s += D[i * p->nin + j] * c->bin[j];
            c->bout[i] = a + s;
        }
        for (i = 0; i < p->nx; ++i) {
            double a = 0.0, s = 0.0;
            for (j = 0; j < p->nx; ++j) a += A[i * p->nx + j] * x[j];
            for (j = 0; j < p->nin; ++j) s += B[i * p->nin + j] * c->bin[j];
            c->bnext[i] = a + s;
        }
    }
}

static void ws_block_inputs(ws_instance *c, int b, const double *held, int zero) {
    const ws_block *p = &ws_blocks[b];
    int j, have_linear = 0;
    for (j = 0; j < p->nin; ++j) {
        int kind = ws_sin_kind[p->in_off + j], index = ws_sin_index[p->in_off + j];
        if (zero) {
            c->bin[j] = 0.0;
        } else if (kind == 0) {
            c->bin[j] = c->s.u[index];
        } else if (kind == 1) {
            c->bin[j] = held[index];
        } else {
            if (!have_linear) {
                ws_linear_inputs(c, held);
                have_linear = 1;
            }
            c->bin[j] = ws_linear_output(c, index);
        }
    }
}

static int ws_due(const ws_instance *c, int b, double t) {
    double tb = c->s.t_start + (double)c->s.k[b] * ws_blocks[b].Ts;
    return fabs(tb - t) <= WS_EVENT_TOLERANCE;
}

/* The sample instant at the present time, applied to (sx, held); returns the number of
 * blocks that were due. The order is wirestate's: delayed blocks publish, direct blocks
 * sample in signal order, delayed blocks update. */
static int ws_sample(ws_instance *c, double *sx, double *held, int *due) {
    int n = 0, o, b;
    for (o = 0; o < WS_NSB; ++o) {
        due[o] = ws_due(c, ws_sample_order[o], c->s.time);
        n += due[o];
    }
    if (n == 0) return 0;
    for (o = 0; o < WS_NSB; ++o) {
        b = ws_sample_order[o];
        if (!due[o] || ws_blocks[b].feedthrough) continue;
        ws_block_inputs(c, b, held, 1);
        ws_block_sample(c, b, sx);
        memcpy(held + ws_blocks[b].y_off, c->bout, sizeof(double) * ws_blocks[b].ny);
    }
    for (o = 0; o < WS_NSB; ++o) {
        b = ws_sample_order[o];
        if (!due[o] || !ws_blocks[b].feedthrough) continue;
        ws_block_inputs(c, b, held, 0);
        ws_block_sample(c, b, sx);
        memcpy(held + ws_blocks[b].y_off, c->bout, sizeof(double) * ws_blocks[b].ny);
        memcpy(sx + ws_blocks[b].x_off, c->bnext, sizeof(double) * ws_blocks[b].nx);
    }
    for (o = 0; o < WS_NSB; ++o) {
        b = ws_sample_order[o];
        if (!due[o] || ws_blocks[b].feedthrough) continue;
        ws_block_inputs(c, b, held, 0);
        ws_block_sample(c, b, sx);
        memcpy(sx + ws_blocks[b].x_off, c->bnext, sizeof(double) * ws_blocks[b].nx);
    }
    return n;
}

/* values after the sample pending at the present time, and the outputs */
static void ws_update_outputs(ws_instance *c) {
    int due[WS_N1(WS_NSB)];
    int i;
    if (c->post_valid) return;
    memcpy(c->post_sx, c->s.sx, sizeof c->post_sx);
    memcpy(c->post_held, c->s.held, sizeof c->post_held);
    ws_sample(c, c->post_sx, c->post_held, due);
    ws_linear_inputs(c, c->post_held);
    for (i = 0; i < WS_NY; ++i)
        c->y[i] = ws_out_kind[i] == 0 ? ws_linear_output(c, ws_out_index[i])
                                      : c->post_held[ws_out_index[i]];
    c->post_valid = 1;
}

static void ws_defaults(ws_instance *c) {
    memset(&c->s, 0, sizeof c->s);
    memcpy(c->s.x, ws_x0, sizeof c->s.x);
    memcpy(c->s.sx, ws_sx0, sizeof c->s.sx);
    memcpy(c->s.u, ws_u0, sizeof c->s.u);
    c->post_valid = 0;
}

/* -- FMI 2.0 API --------------------------------------------------------------------- */

const char *fmi2GetTypesPlatform(void) { return fmi2TypesPlatform; }
const char *fmi2GetVersion(void) { return fmi2Version; }

fmi2Status fmi2SetDebugLogging(fmi2Component comp, fmi2Boolean loggingOn, size_t nCategories,
                               const fmi2String categories[]) {
    ws_instance *c = (ws_instance *)comp;
    size_t i;
    int k;
    if (!ws_allowed(c, "fmi2SetDebugLogging", M_ANY)) return fmi2Error;
    c->logging = loggingOn ? 1 : 0;
    if (nCategories == 0) {
        for (k = 0; k < WS_N_LOG; ++k) c->categories[k] = c->logging;
        return fmi2OK;
    }
    for (k = 0; k < WS_N_LOG; ++k) c->categories[k] = 0;
    for (i = 0; i < nCategories; ++i) {
        int found = 0;
        for (k = 0; k < WS_N_LOG; ++k) {
            if (categories[i] != NULL && strcmp(categories[i], ws_log_names[k]) == 0) {
                c->categories[k] = c->logging;
                found = 1;
            }
        }
        if (!found) return ws_fail(c, "fmi2SetDebugLogging", "unknown log category");
    }
    return fmi2OK;
}

fmi2Component fmi2Instantiate(fmi2String instanceName, fmi2Type fmuType, fmi2String fmuGUID,
                              fmi2String fmuResourceLocation,
                              const fmi2CallbackFunctions *functions, fmi2Boolean visible,
                              fmi2Boolean loggingOn) {
    ws_instance *c;
    size_t length;
    (void)fmuResourceLocation;
    (void)visible;
    if (functions == NULL || functions->allocateMemory == NULL || functions->freeMemory == NULL)
        return NULL;
    if (instanceName == NULL) instanceName = WS_MODEL_IDENTIFIER;
    if (fmuType != fmi2CoSimulation || fmuGUID == NULL || strcmp(fmuGUID, WS_GUID) != 0) {
        if (functions->logger != NULL)
            functions->logger(functions->componentEnvironment, instanceName, fmi2Error,
                              "logStatusError",
                              "fmi2Instantiate: this FMU is co-simulation only and its GUID "
                              "is %s", WS_GUID);
        return NULL;
    }
    c = (ws_instance *)functions->allocateMemory(1, sizeof(ws_instance));
    if (c == NULL) return NULL;
    memset(c, 0, sizeof *c);
    c->cb = *functions;
    length = strlen(instanceName) + 1;
    c->name = (char *)functions->allocateMemory(length, 1);
    if (c->name == NULL) {
        functions->freeMemory(c);
        return NULL;
    }
    memcpy(c->name, instanceName, length);
    c->logging = loggingOn ? 1 : 0;
    c->categories[WS_LOG_ERROR] = c->categories[WS_LOG_WARNING] = 1;
    c->categories[WS_LOG_ALL] = 1;
    c->mode = WS_INSTANTIATED;
    ws_defaults(c);
    return c;
}

void fmi2FreeInstance(fmi2Component comp) {
    ws_instance *c = (ws_instance *)comp;
    fmi2CallbackFreeMemory release;
    if (c == NULL) return;
    release = c->cb.freeMemory;
    release(c->name);
    release(c);
}

fmi2Status fmi2SetupExperiment(fmi2Component comp, fmi2Boolean toleranceDefined,
                               fmi2Real tolerance, fmi2Real startTime,
                               fmi2Boolean stopTimeDefined, fmi2Real stopTime) {
    ws_instance *c = (ws_instance *)comp;
    (void)toleranceDefined;
    (void)tolerance;
    (void)stopTimeDefined;
    (void)stopTime;
    if (!ws_allowed(c, "fmi2SetupExperiment", M_INST)) return fmi2Error;
    c->s.time = startTime;
    c->s.t_start = startTime;
    c->post_valid = 0;
    return fmi2OK;
}

fmi2Status fmi2EnterInitializationMode(fmi2Component comp) {
    ws_instance *c = (ws_instance *)comp;
    if (!ws_allowed(c, "fmi2EnterInitializationMode", M_INST)) return fmi2Error;
    c->mode = WS_INITIALIZATION;
    return fmi2OK;
}

fmi2Status fmi2ExitInitializationMode(fmi2Component comp) {
    ws_instance *c = (ws_instance *)comp;
    if (!ws_allowed(c, "fmi2ExitInitializationMode", M_INIT)) return fmi2Error;
    c->mode = WS_STEPPING;
    return fmi2OK;
}

fmi2Status fmi2Terminate(fmi2Component comp) {
    ws_instance *c = (ws_instance *)comp;
    if (!ws_allowed(c, "fmi2Terminate", M_STEP | M_ERR)) return fmi2Error;
    c->mode = WS_TERMINATED;
    return fmi2OK;
}

fmi2Status fmi2Reset(fmi2Component comp) {
    ws_instance *c = (ws_instance *)comp;
    if (!ws_allowed(c, "fmi2Reset", M_ANY)) return fmi2Error;
    ws_defaults(c);
    c->n_cached = 0;
    c->next_slot = 0;
    c->mode = WS_INSTANTIATED;
    return fmi2OK;
}

fmi2Status fmi2GetReal(fmi2Component comp, const fmi2ValueReference vr[], size_t nvr,
                       fmi2Real value[]) {
    ws_instance *c = (ws_instance *)comp;
    size_t i;
    if (!ws_allowed(c, "fmi2GetReal", M_INST | M_INIT | M_STEP | M_TERM | M_ERR))
        return fmi2Error;
    if (nvr > 0 && (vr == NULL || value == NULL))
        return ws_fail(c, "fmi2GetReal", "null array");
    for (i = 0; i < nvr; ++i) {
        fmi2ValueReference r = vr[i];
        if (r < WS_NU) {
            value[i] = c->s.u[r];
        } else if (r < WS_NU + WS_NY) {
            ws_update_outputs(c);
            value[i] = c->y[r - WS_NU];
        } else if (r < WS_NU + WS_NY + WS_NX) {
            value[i] = c->s.x[r - WS_NU - WS_NY];
        } else if (r < WS_NVR) {
            value[i] = c->s.sx[r - WS_NU - WS_NY - WS_NX];
        } else {
            ws_log(c, fmi2Error, "fmi2GetReal: no Real variable has value reference %u", r);
            return fmi2Error;
        }
    }
    return fmi2OK;
}

fmi2Status fmi2SetReal(fmi2Component comp, const fmi2ValueReference vr[], size_t nvr,
                       const fmi2Real value[]) {
    ws_instance *c = (ws_instance *)comp;
    size_t i;
    if (!ws_allowed(c, "fmi2SetReal", M_INST | M_INIT | M_STEP)) return fmi2Error;
    if (nvr > 0 && (vr == NULL || value == NULL))
        return ws_fail(c, "fmi2SetReal", "null array");
    for (i = 0; i < nvr; ++i) {
        fmi2ValueReference r = vr[i];
        if (r < WS_NU) {
            c->s.u[r] = value[i];
        } else if (r >= WS_NU + WS_NY && r < WS_NVR && c->mode != WS_STEPPING) {
            /* states are initial="exact": settable before initialisation ends */
            if (r < WS_NU + WS_NY + WS_NX)
                c->s.x[r - WS_NU - WS_NY] = value[i];
            else
                c->s.sx[r - WS_NU - WS_NY - WS_NX] = value[i];
        } else {
            ws_log(c, fmi2Error,
                   "fmi2SetReal: value reference %u is not an input (states are settable "
                   "only before initialisation ends; outputs never)", r);
            return fmi2Error;
        }
    }
    c->post_valid = 0;
    return fmi2OK;
}

fmi2Status fmi2DoStep(fmi2Component comp, fmi2Real currentCommunicationPoint,
                      fmi2Real communicationStepSize,
                      fmi2Boolean noSetFMUStatePriorToCurrentPoint) {
    ws_instance *c = (ws_instance *)comp;
    int due[WS_N1(WS_NSB)];
    double end;
    (void)noSetFMUStatePriorToCurrentPoint;
    if (!ws_allowed(c, "fmi2DoStep", M_STEP)) return fmi2Error;
    if (!(communicationStepSize >= 0.0) || !isfinite(communicationStepSize))
        return ws_fail(c, "fmi2DoStep", "the communication step size must be >= 0");
    /* the master's time is authoritative; a master that sums its steps differs from ours
     * by rounding only, anything more is a master error */
    if (fabs(currentCommunicationPoint - c->s.time) >
        1e-6 * WS_MAX(fabs(communicationStepSize), WS_DEFAULT_STEP)) {
        ws_log(c, fmi2Error, "fmi2DoStep: the communication point %.17g s is not the FMU's "
               "time %.17g s", currentCommunicationPoint, c->s.time);
        return fmi2Error;
    }
    c->s.time = currentCommunicationPoint;
    end = c->s.time + communicationStepSize;
    for (;;) {
        double next = end;
        int b, o;
        if (ws_sample(c, c->s.sx, c->s.held, due) > 0) {
            for (o = 0; o < WS_NSB; ++o)
                if (due[o]) ++c->s.k[ws_sample_order[o]];
        }
        for (b = 0; b < WS_NSB; ++b) {
            double tb = c->s.t_start + (double)c->s.k[b] * ws_blocks[b].Ts;
            if (tb < next) next = tb;
        }
        if (next < end - WS_EVENT_TOLERANCE) {
            ws_advance(c, next - c->s.time, c->s.held);
            c->s.time = next;
            continue;
        }
        ws_advance(c, end - c->s.time, c->s.held);
        c->s.time = end;
        break;
    }
    c->post_valid = 0;
    return fmi2OK;
}

fmi2Status fmi2CancelStep(fmi2Component comp) {
    return ws_fail((ws_instance *)comp, "fmi2CancelStep", "doStep never runs asynchronously");
}

/* -- status -------------------------------------------------------------------------- */

fmi2Status fmi2GetStatus(fmi2Component comp, const fmi2StatusKind s, fmi2Status *value) {
    (void)s;
    (void)value;
    ws_log((ws_instance *)comp, fmi2Discard, "fmi2GetStatus: doStep is never pending");
    return fmi2Discard;
}

fmi2Status fmi2GetRealStatus(fmi2Component comp, const fmi2StatusKind s, fmi2Real *value) {
    ws_instance *c = (ws_instance *)comp;
    if (c == NULL || value == NULL) return fmi2Error;
    if (s == fmi2LastSuccessfulTime) {
        *value = c->s.time;
        return fmi2OK;
    }
    return fmi2Discard;
}

fmi2Status fmi2GetIntegerStatus(fmi2Component comp, const fmi2StatusKind s, fmi2Integer *value) {
    (void)comp;
    (void)s;
    (void)value;
    return fmi2Discard;
}

fmi2Status fmi2GetBooleanStatus(fmi2Component comp, const fmi2StatusKind s, fmi2Boolean *value) {
    if (comp == NULL || value == NULL) return fmi2Error;
    if (s == fmi2Terminated) {
        *value = fmi2False;
        return fmi2OK;
    }
    return fmi2Discard;
}

fmi2Status fmi2GetStringStatus(fmi2Component comp, const fmi2StatusKind s, fmi2String *value) {
    (void)comp;
    (void)s;
    (void)value;
    return fmi2Discard;
}

/* -- variables of other types: this FMU has none ------------------------------------- */

static fmi2Status ws_none(fmi2Component comp, const char *where, size_t nvr) {
    ws_instance *c = (ws_instance *)comp;
    if (!ws_allowed(c, where, M_ANY)) return fmi2Error;
    if (nvr == 0) return fmi2OK;
    ws_log(c, fmi2Error, "%s: this FMU has only Real variables", where);
    return fmi2Error;
}

fmi2Status fmi2GetInteger(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                          fmi2Integer value[]) {
    (void)vr;
    (void)value;
    return ws_none(c, "fmi2GetInteger", nvr);
}
fmi2Status fmi2GetBoolean(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                          fmi2Boolean value[]) {
    (void)vr;
    (void)value;
    return ws_none(c, "fmi2GetBoolean", nvr);
}
fmi2Status fmi2GetString(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                         fmi2String value[]) {
    (void)vr;
    (void)value;
    return ws_none(c, "fmi2GetString", nvr);
}
fmi2Status fmi2SetInteger(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                          const fmi2Integer value[]) {
    (void)vr;
    (void)value;
    return ws_none(c, "fmi2SetInteger", nvr);
}
fmi2Status fmi2SetBoolean(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                          const fmi2Boolean value[]) {
    (void)vr;
    (void)value;
    return ws_none(c, "fmi2SetBoolean", nvr);
}
fmi2Status fmi2SetString(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                         const fmi2String value[]) {
    (void)vr;
    (void)value;
    return ws_none(c, "fmi2SetString", nvr);
}

/* -- FMU state ----------------------------------------------------------------------- */

fmi2Status fmi2GetFMUstate(fmi2Component comp, fmi2FMUstate *FMUstate) {
    ws_instance *c = (ws_instance *)comp;
    ws_state *copy;
    if (!ws_allowed(c, "fmi2GetFMUstate", M_INST | M_INIT | M_STEP | M_TERM)) return fmi2Error;
    if (FMUstate == NULL) return ws_fail(c, "fmi2GetFMUstate", "null pointer");
    copy = (ws_state *)*FMUstate;
    if (copy == NULL) {
        copy = (ws_state *)c->cb.allocateMemory(1, sizeof(ws_state));
        if (copy == NULL) return ws_fail(c, "fmi2GetFMUstate", "out of memory");
    }
    *copy = c->s;
    *FMUstate = copy;
    return fmi2OK;
}

fmi2Status fmi2SetFMUstate(fmi2Component comp, fmi2FMUstate FMUstate) {
    ws_instance *c = (ws_instance *)comp;
    if (!ws_allowed(c, "fmi2SetFMUstate", M_INST | M_INIT | M_STEP | M_TERM)) return fmi2Error;
    if (FMUstate == NULL) return ws_fail(c, "fmi2SetFMUstate", "null state");
    c->s = *(const ws_state *)FMUstate;
    c->post_valid = 0;
    return fmi2OK;
}

fmi2Status fmi2FreeFMUstate(fmi2Component comp, fmi2FMUstate *FMUstate) {
    ws_instance *c = (ws_instance *)comp;
    if (c == NULL) return fmi2Error;
    if (FMUstate == NULL || *FMUstate == NULL) return fmi2OK;
    c->cb.freeMemory(*FMUstate);
    *FMUstate = NULL;
    return fmi2OK;
}

fmi2Status fmi2SerializedFMUstateSize(fmi2Component comp, fmi2FMUstate FMUstate, size_t *size) {
    (void)FMUstate;
    if (comp == NULL || size == NULL) return fmi2Error;
    *size = sizeof(ws_header) + sizeof(ws_state);
    return fmi2OK;
}

fmi2Status fmi2SerializeFMUstate(fmi2Component comp, fmi2FMUstate FMUstate, fmi2Byte data[],
                                 size_t size) {
    ws_instance *c = (ws_instance *)comp;
    ws_header header;
    if (c == NULL) return fmi2Error;
    if (FMUstate == NULL || data == NULL) return ws_fail(c, "fmi2SerializeFMUstate", "null");
    if (size < sizeof header + sizeof(ws_state))
        return ws_fail(c, "fmi2SerializeFMUstate", "buffer too small");
    memset(&header, 0, sizeof header);
    memcpy(header.magic, "WSFMU01", 8);
    strncpy(header.guid, WS_GUID, sizeof header.guid - 1);
    header.size = sizeof(ws_state);
    memcpy(data, &header, sizeof header);
    memcpy(data + sizeof header, FMUstate, sizeof(ws_state));
    return fmi2OK;
}

fmi2Status fmi2DeSerializeFMUstate(fmi2Component comp, const fmi2Byte serializedState[],
                                   size_t size, fmi2FMUstate *FMUstate) {
    ws_instance *c = (ws_instance *)comp;
    ws_header header;
    ws_state *copy;
    if (c == NULL) return fmi2Error;
    if (serializedState == NULL || FMUstate == NULL)
        return ws_fail(c, "fmi2DeSerializeFMUstate", "null");
    if (size != sizeof header + sizeof(ws_state))
        return ws_fail(c, "fmi2DeSerializeFMUstate", "the data has the wrong size");
    memcpy(&header, serializedState, sizeof header);
    if (memcmp(header.magic, "WSFMU01", 8) != 0 || strncmp(header.guid, WS_GUID, 47) != 0 ||
        header.size != sizeof(ws_state))
        return ws_fail(c, "fmi2DeSerializeFMUstate", "the data belongs to another FMU");
    copy = (ws_state *)*FMUstate;
    if (copy == NULL) {
        copy = (ws_state *)c->cb.allocateMemory(1, sizeof(ws_state));
        if (copy == NULL) return ws_fail(c, "fmi2DeSerializeFMUstate", "out of memory");
    }
    memcpy(copy, serializedState + sizeof header, sizeof(ws_state));
    *FMUstate = copy;
    return fmi2OK;
}

/* -- not provided (capability flags say so) ------------------------------------------ */

fmi2Status fmi2GetDirectionalDerivative(fmi2Component comp,
                                        const fmi2ValueReference vUnknown_ref[], size_t nUnknown,
                                        const fmi2ValueReference vKnown_ref[], size_t nKnown,
                                        const fmi2Real dvKnown[], fmi2Real dvUnknown[]) {
    (void)vUnknown_ref;
    (void)nUnknown;
    (void)vKnown_ref;
    (void)nKnown;
    (void)dvKnown;
    (void)dvUnknown;
    return ws_fail((ws_instance *)comp, "fmi2GetDirectionalDerivative", "not provided");
}

fmi2Status fmi2SetRealInputDerivatives(fmi2Component comp, const fmi2ValueReference vr[],
                                       size_t nvr, const fmi2Integer order[],
                                       const fmi2Real value[]) {
    (void)vr;
    (void)nvr;
    (void)order;
    (void)value;
    return ws_fail((ws_instance *)comp, "fmi2SetRealInputDerivatives",
                   "inputs are held over the step (zero-order hold)");
}

fmi2Status fmi2GetRealOutputDerivatives(fmi2Component comp, const fmi2ValueReference vr[],
                                        size_t nvr, const fmi2Integer order[],
                                        fmi2Real value[]) {
    (void)vr;
    (void)nvr;
    (void)order;
    (void)value;
    return ws_fail((ws_instance *)comp, "fmi2GetRealOutputDerivatives", "not provided");
}
