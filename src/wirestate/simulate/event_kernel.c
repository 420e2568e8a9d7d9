/* The per-stretch diode event search of wirestate's switched engine, in C.
 *
 * One call does, for one stretch of a run, what SwitchedEngine._first_crossing does in
 * Python on the modal form (wirestate/simulate/switched.py): the margin band, the
 * never-crosses bound, the sign-change search on the same trial points (even and early
 * fractions of the stretch, the rings of oscillating eigenvalues) and the safeguarded
 * Newton refinement of each margin that leaves its side first. The Python code is the
 * specification and the reference in the tests; every step below names the method it
 * follows there. Nothing here is a second copy of the circuit's equations: the per-mode
 * data (eigenvalues, diode rows in modal coordinates, tolerance rows) come from the
 * engine's caches, which come from the one compile path.
 *
 * Complex numbers are pairs of doubles (numpy's complex128 layout); complex arithmetic
 * is written out so that it rounds as numpy's does (products as (ac - bd, ad + bc),
 * division by Smith's method, expm1 as numpy's nc_expm1).
 */
#include <math.h>
#include <stdlib.h>

typedef struct {
    double re, im;
} cplx;

static cplx c_mul(cplx a, cplx b)
{
    cplx r = {a.re * b.re - a.im * b.im, a.re * b.im + a.im * b.re};
    return r;
}

static cplx c_add(cplx a, cplx b)
{
    cplx r = {a.re + b.re, a.im + b.im};
    return r;
}

static cplx c_scale(cplx a, double s)
{
    cplx r = {a.re * s, a.im * s};
    return r;
}

static cplx c_exp(cplx w)
{
    double e = exp(w.re);
    cplx r = {e * cos(w.im), e * sin(w.im)};
    return r;
}

/* numpy's complex expm1 */
static cplx c_expm1(cplx w)
{
    double a = sin(w.im / 2.0);
    cplx r = {expm1(w.re) * cos(w.im) - 2.0 * a * a, exp(w.re) * sin(w.im)};
    return r;
}

/* Smith's division, as numpy */
static cplx c_div(cplx a, cplx b)
{
    cplx r;
    if (fabs(b.re) >= fabs(b.im)) {
        double rat = b.im / b.re, scl = 1.0 / (b.re + b.im * rat);
        r.re = (a.re + a.im * rat) * scl;
        r.im = (a.im - a.re * rat) * scl;
    } else {
        double rat = b.re / b.im, scl = 1.0 / (b.im + b.re * rat);
        r.re = (a.re * rat + a.im) * scl;
        r.im = (a.im * rat - a.re) * scl;
    }
    return r;
}

/* phi1(w) = (e^w - 1) / w; 1 + w / 2 below |w| = 1e-8 unless `all_big` (as _phi1) */
static cplx c_phi1(cplx w, int all_big)
{
    if (all_big || hypot(w.re, w.im) >= 1e-8)
        return c_div(c_expm1(w), w);
    cplx r = {1.0 + 0.5 * w.re, 0.5 * w.im};
    return r;
}

/* indices into the per-mode pointer table */
enum { M_LAM, M_R, M_PV, M_TOLROWS, M_RABS, M_INVRATE, M_LAMREAL, M_SIGN, M_OSC, M_SPACING,
       M_DECAY, M_EVEN, M_EARLY, M_VECTORS, M_MARGIN_ROWS, M_PVABS, M_ON, M_COUNT };
/* indices into the per-held-inputs pointer table */
enum { H_Q, H_TOLCONST, H_B, H_RB, H_BLAM, H_FINAL, H_NOISE, H_BOSC, H_PC, H_COUNT };

#define N_EVEN 16
#define N_EARLY 9
#define RING_BUDGET 20000

typedef struct {
    int n, nd;
    const cplx *lam, *R, *b, *Rb;
    const cplx *z0;
    double slowest;
} modal_t;

/* the modal part of every margin at tau: Re(R (e^{lam tau} z0 + tau phi1 b)) (_modal_values) */
static void modal_values(const modal_t *m, double tau, int all_big, cplx *work, double *out)
{
    for (int k = 0; k < m->n; k++) {
        cplx w = c_scale(m->lam[k], tau);
        cplx e = c_exp(w);
        cplx phi = c_scale(c_phi1(w, all_big), tau);
        work[k] = c_add(c_mul(e, m->z0[k]), c_mul(phi, m->b[k]));
    }
    for (int i = 0; i < m->nd; i++) {
        double s = 0.0;
        for (int k = 0; k < m->n; k++)
            s += c_mul(m->R[i * m->n + k], work[k]).re;
        out[i] = s;
    }
}

/* one diode's watch function and its rate at tau (the `value` of _refine) */
static void watch(const modal_t *m, int row, double sign, double q, double level, double tau,
                  double *f, double *df)
{
    int all_big = tau * m->slowest >= 1e-8;
    cplx v = {0.0, 0.0}, p = {0.0, 0.0}, d = {0.0, 0.0};
    for (int k = 0; k < m->n; k++) {
        cplx rz = c_mul(m->R[row * m->n + k], m->z0[k]);
        cplx rb = m->Rb[row * m->n + k];
        cplx slope = c_add(c_mul(rz, m->lam[k]), rb);
        cplx w = c_scale(m->lam[k], tau);
        cplx e = c_exp(w);
        v = c_add(v, c_mul(rz, e));
        p = c_add(p, c_mul(rb, c_phi1(w, all_big)));
        d = c_add(d, c_mul(slope, e));
    }
    *f = sign * ((v.re + tau * p.re) + q) - level;
    *df = sign * d.re;
}

/* safeguarded Newton on one margin in [a, b] (_refine) */
static double refine(const modal_t *m, int row, double sign, double q, double a, double b,
                     double tol_t, double tol_v)
{
    double level = 0.0, fa, dfa;
    watch(m, row, sign, q, level, a, &fa, &dfa);
    if (fa <= 0.0) {
        level = -tol_v;
        watch(m, row, sign, q, level, a, &fa, &dfa);
        if (fa <= 0.0)
            return a;
    }
    double tau = a, f = fa, df = dfa;
    for (int it = 0; it < 100; it++) {
        double step = df < 0.0 ? tau - f / df : 0.5 * (a + b);
        tau = (a < step && step < b) ? step : 0.5 * (a + b);
        watch(m, row, sign, q, level, tau, &f, &df);
        if (f > 0.0) {
            a = tau;
            if (b - a > tol_t && df < 0.0 && f / -df < 0.5 * tol_t) {
                double probe = fmin(b, tau + tol_t), fp, dfp;
                watch(m, row, sign, q, level, probe, &fp, &dfp);
                if (fp <= 0.0)
                    return probe;
            }
        } else {
            b = tau;
        }
        if (b - a <= tol_t)
            break;
    }
    return b;
}

/* the trial points in the order _search concatenates them: even, early (fresh), the
 * thinned rings as even pieces, then the rings; plan[j] > 0 a ring of that many points,
 * plan[j] < 0 a thinned piece of -plan[j] points over span[j] */
typedef struct {
    int fresh, nosc;
    double h;
    const double *even, *early, *spacing;
    const long *plan;
    const double *span;
} points_t;

static long point_count(const points_t *p)
{
    long total = N_EVEN + (p->fresh ? N_EARLY : 0);
    for (int j = 0; j < p->nosc; j++)
        total += labs(p->plan[j]);
    return total;
}

/* the time of point `index` and, for ring points, its ring and column */
static double point_time(const points_t *p, long index, int *ring, long *column)
{
    *ring = -1;
    if (index < N_EVEN)
        return p->h * p->even[index];
    index -= N_EVEN;
    if (p->fresh) {
        if (index < N_EARLY)
            return p->h * p->early[index];
        index -= N_EARLY;
    }
    for (int j = 0; j < p->nosc; j++) {
        if (p->plan[j] < 0) {
            long count = -p->plan[j];
            if (index < count) /* np.linspace(0, span, count + 1)[1:] */
                return index + 1 == count ? p->span[j] : (index + 1) * (p->span[j] / count);
            index -= count;
        }
    }
    for (int j = 0; j < p->nosc; j++) {
        if (p->plan[j] > 0) {
            if (index < p->plan[j]) {
                *ring = j;
                *column = index;
                return p->spacing[j] * (double)(index + 1);
            }
            index -= p->plan[j];
        }
    }
    return NAN;
}

/* the modal part of every margin at trial point `index` (time t): on the fly, or from the
 * ring exponentials the engine caches per mode (the ring part of _search) */
static void margins_at(const modal_t *m, const points_t *p, long index, double t, int all_big,
                       const double *const *rings, const long *ring_size, cplx *work,
                       double *out)
{
    int ring;
    long column;
    point_time(p, index, &ring, &column);
    if (ring < 0) {
        modal_values(m, t, all_big, work, out);
        return;
    }
    const cplx *E = (const cplx *)rings[2 * ring], *Phi = (const cplx *)rings[2 * ring + 1];
    long ld = ring_size[ring];
    for (int i = 0; i < m->nd; i++) {
        double s = 0.0;
        for (int k = 0; k < m->n; k++) {
            cplx rz = c_mul(m->R[i * m->n + k], m->z0[k]);
            s += c_mul(rz, E[k * ld + column]).re;
            s += c_mul(m->Rb[i * m->n + k], Phi[k * ld + column]).re;
        }
        out[i] = s;
    }
}

/* Returns 0 when no diode leaves its side in (0, h], 1 with the time in out[0] and the
 * diodes that leave within tol_t of it marked in `leaving`, 2 when ring need[0] must first
 * hold need[1] points (the caller grows its cache and calls again). */
int ws_first_crossing(int n, int nd, int nosc, int stable, int fresh, double h, double tol_t,
                      double first_ring, double slowest, const double *const *M,
                      const double *const *H, const double *const *rings, const long *ring_size,
                      const double *x, const double *z0_raw, double *out, int *leaving,
                      long *need)
{
    const cplx *lam = (const cplx *)M[M_LAM], *R = (const cplx *)M[M_R];
    const double *Pv = M[M_PV], *tolrows = M[M_TOLROWS], *Rabs = M[M_RABS];
    const double *invrate = M[M_INVRATE], *lamreal = M[M_LAMREAL], *sign = M[M_SIGN];
    const double *osc = M[M_OSC], *spacing = M[M_SPACING], *decay = M[M_DECAY];
    const double *q = H[H_Q], *tolconst = H[H_TOLCONST], *noise = H[H_NOISE];
    const cplx *b = (const cplx *)H[H_B], *Rb = (const cplx *)H[H_RB];
    const cplx *z0 = (const cplx *)z0_raw;
    modal_t m = {n, nd, lam, R, b, Rb, z0, slowest};
    int status = 0;
    double *tol = malloc(sizeof(double) * (size_t)(5 * nd + 2 * nosc + 1));
    double *bias = tol + nd, *offset = bias + nd, *vals = offset + nd, *roots = vals + nd;
    double *span = roots + nd;
    long *plan = malloc(sizeof(long) * (size_t)(nosc + 1));
    cplx *work = malloc(sizeof(cplx) * (size_t)(n + 1));
    if (!tol || !plan || !work) {
        status = -1;
        goto done;
    }
    /* the margin band widened by the modal noise (_margin_tolerance, _modal_noise), and
     * the bias of the modal sum at tau = 0 against the direct value */
    for (int i = 0; i < nd; i++) {
        double t = 0.0, noise_i = 0.0, direct = 0.0, modal = 0.0;
        for (int k = 0; k < n; k++) {
            t += tolrows[i * n + k] * fabs(x[k]);
            noise_i += Rabs[i * n + k] * (noise[k] * fmin(h, invrate[k]));
            direct += Pv[i * n + k] * x[k];
            modal += c_mul(R[i * n + k], z0[k]).re;
        }
        tol[i] = (tolconst[i] + t) + 1e-13 * noise_i;
        bias[i] = direct - modal;
        offset[i] = q[i] + bias[i];
    }
    /* _never_crosses */
    double first = fmin(h * (fresh ? M[M_EARLY][0] : M[M_EVEN][0]), first_ring);
    if (stable) {
        const cplx *blam = (const cplx *)H[H_BLAM];
        const double *final = H[H_FINAL];
        int never = 1;
        for (int i = 0; i < nd && never; i++) {
            double spread = 0.0;
            for (int k = 0; k < n; k++) {
                cplx c = c_scale(c_add(z0[k], blam[k]), exp(lamreal[k] * first));
                spread += Rabs[i * n + k] * hypot(c.re, c.im);
            }
            double fin = final[i] + sign[i] * (offset[i] - q[i]);
            never = fin - spread > tol[i];
        }
        if (never)
            goto done;
    }
    /* _search_times: which rings the search walks, and how far */
    double tolmin = INFINITY;
    for (int i = 0; i < nd; i++)
        tolmin = fmin(tolmin, tol[i]);
    long budget = RING_BUDGET;
    const cplx *bosc = (const cplx *)H[H_BOSC];
    for (int j = 0; j < nosc; j++) {
        int k = (int)osc[j];
        double sp = h;
        if (tolmin > 0.0) {
            cplx c = c_add(z0[k], bosc[j]);
            double weight = 0.0;
            for (int i = 0; i < nd; i++) {
                cplx t = c_mul(R[i * n + k], c);
                weight = fmax(weight, hypot(t.re, t.im));
            }
            if (weight <= 0.0)
                sp = 0.0;
            else if (decay[j] > 0.0)
                sp = fmin(h, log(fmax(weight / tolmin, 1.0)) / decay[j]);
        }
        long count = (long)ceil(sp / spacing[j]);
        plan[j] = 0;
        span[j] = sp;
        if (count > 16 && sp > 0.0) {
            if (count > budget) {
                count = budget > 0 ? budget : 0;
                plan[j] = -count;
            } else {
                long whole = (long)floor(h / spacing[j]);
                plan[j] = count < whole ? count : whole;
                if (ring_size[j] < plan[j]) {
                    need[0] = j;
                    need[1] = plan[j];
                    status = 2;
                    goto done;
                }
            }
            budget -= count;
        }
    }
    /* the search: the earliest trial point (by time, then by order, as the stable sort
     * of _first_crossing) where a margin is below its band */
    points_t pts = {fresh, nosc, h, M[M_EVEN], M[M_EARLY], spacing, plan, span};
    long total = point_count(&pts);
    int all_big = h * (fresh ? M[M_EARLY][0] : M[M_EVEN][0]) * slowest >= 1e-8;
    long winner = -1;
    double t_win = INFINITY;
    for (long index = 0; index < total; index++) {
        int ring;
        long column;
        double t = point_time(&pts, index, &ring, &column);
        if (winner >= 0 && t >= t_win)
            continue; /* a later or equal time cannot come first */
        margins_at(&m, &pts, index, t, all_big, rings, ring_size, work, vals);
        for (int i = 0; i < nd; i++) {
            if (sign[i] * (vals[i] + offset[i]) < -tol[i]) {
                winner = index;
                t_win = t;
                break;
            }
        }
    }
    if (winner < 0)
        goto done;
    /* the point before the winner in sorted order: the latest earlier time, or an equal
     * time earlier in the concatenation */
    double a = 0.0;
    for (long index = 0; index < total; index++) {
        int ring;
        long column;
        double t = point_time(&pts, index, &ring, &column);
        if (t < t_win || (t == t_win && index < winner))
            a = fmax(a, t);
    }
    /* recompute the winner's margins and refine each one below its band */
    margins_at(&m, &pts, winner, t_win, all_big, rings, ring_size, work, vals);
    double best = INFINITY;
    for (int i = 0; i < nd; i++) {
        roots[i] = INFINITY;
        if (sign[i] * (vals[i] + offset[i]) < -tol[i]) {
            roots[i] = refine(&m, i, sign[i], q[i] + bias[i], a, t_win, tol_t, tol[i]);
            best = fmin(best, roots[i]);
        }
    }
    for (int i = 0; i < nd; i++)
        leaving[i] = roots[i] <= best + tol_t;
    out[0] = best;
    status = 1;
done:
    free(tol);
    free(plan);
    free(work);
    return status;
}

/* Taylor coefficients of phi1 highest first, as _PHI1_SERIES */
static const double PHI1_SERIES[7] = {1.0 / 5040.0, 1.0 / 720.0, 1.0 / 120.0, 1.0 / 24.0,
                                      1.0 / 6.0,    1.0 / 2.0,   1.0};

/* States at `count` times tau from now in modal form (SwitchedEngine.states_at):
 * out[i * ld + j] = Re(V (e^{lam tau_j} z0 + tau_j phi1(lam tau_j) b))_i, with phi1
 * from e^w where |w| >= 1e-2 and from its seven-term series below, as _phi1 on the
 * large arrays of a stretch's samples. Returns -1 when it cannot allocate. */
int ws_states_at(int n, long count, long ld, const double *lam_raw, const double *V_raw,
                 const double *z0_raw, const double *b_raw, const double *taus, double *out)
{
    const cplx *lam = (const cplx *)lam_raw, *V = (const cplx *)V_raw;
    const cplx *z0 = (const cplx *)z0_raw, *b = (const cplx *)b_raw;
    cplx *modal = malloc(sizeof(cplx) * (size_t)(n + 1));
    if (!modal)
        return -1;
    for (long j = 0; j < count; j++) {
        double tau = taus[j];
        for (int k = 0; k < n; k++) {
            cplx w = c_scale(lam[k], tau);
            cplx e = c_exp(w), phi;
            if (w.re * w.re + w.im * w.im >= 1e-4) { /* |w| >= 1e-2, to round-off */
                cplx e1 = {e.re - 1.0, e.im};
                phi = c_div(e1, w);
            } else {
                phi.re = PHI1_SERIES[0];
                phi.im = 0.0;
                for (int c = 1; c < 7; c++) {
                    phi = c_mul(phi, w);
                    phi.re += PHI1_SERIES[c];
                }
            }
            modal[k] = c_add(c_mul(e, z0[k]), c_mul(c_scale(phi, tau), b[k]));
        }
        for (int i = 0; i < n; i++) {
            double s = 0.0;
            for (int k = 0; k < n; k++)
                s += c_mul(V[i * n + k], modal[k]).re;
            out[i * ld + j] = s;
        }
    }
    free(modal);
    return 0;
}

/* The diode on the wrong side of its forward voltage with the largest margin, or -1
 * (SwitchedEngine._inconsistent_diode): margins and rates from [Pv; Pv A] x, the band
 * of _margin_tolerance widened by the rate times `slack` after a located event, and
 * inside the band the search's verdict (`leaving`) or the sign of the rate. */
int ws_inconsistent_diode(int n, int nd, const double *const *M, const double *const *H,
                          const double *x, const int *leaving, double slack)
{
    const double *rows = M[M_MARGIN_ROWS], *pv_abs = M[M_PVABS], *on = M[M_ON];
    const double *q = H[H_Q], *pc = H[H_PC], *tolconst = H[H_TOLCONST];
    int found = -1;
    double score = 0.0;
    for (int i = 0; i < nd; i++) {
        double v = 0.0, r = 0.0, t = 0.0;
        for (int k = 0; k < n; k++) {
            v += rows[i * n + k] * x[k];
            r += rows[(nd + i) * n + k] * x[k];
            t += pv_abs[i * n + k] * fabs(x[k]);
        }
        double vi = v + q[i], ri = r + pc[i];
        double ti = tolconst[i] + 1e-12 * t;
        if (slack != 0.0)
            ti = ti + fabs(ri) * slack;
        int is_on = on[i] != 0.0;
        int wrong = is_on ? vi < -ti : vi > ti;
        if (!wrong && fabs(vi) <= ti)
            wrong = leaving[i] || (is_on ? ri < 0.0 : ri > 0.0);
        if (wrong && fabs(vi) + 1e-300 > score) {
            found = i;
            score = fabs(vi) + 1e-300;
        }
    }
    return found;
}

/* The first index of grid[0..count) not below `value` (Python's bisect_left) */
static long bisect_left(const double *grid, long count, double value)
{
    long lo = 0, hi = count;
    while (lo < hi) {
        long mid = lo + (hi - lo) / 2;
        if (grid[mid] < value)
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo;
}

/* The samples of one stretch and the states there, in one call (SampleClock.sample, then
 * ws_states_at on the times less t0). The sample times follow SampleClock.sample and
 * _fine_range in the same floating-point expressions: output steps grid[lo..hi) by
 * bisection, fine samples last + fine_step * k (k0 <= k < k1) after the latest event
 * (`has_fine` is 0 without fine sampling or before any event), merged and thinned to
 * one per `snap` as np.sort + np.diff there. Writes the times into `times` and the states
 * into `out` (row stride `ld`) and returns their number; when that exceeds `capacity`
 * nothing is evaluated and the number is returned all the same (the caller calls again
 * with room). With `end_state`, also the state `end_tau` from now, where the stretch
 * ends (SwitchedEngine._propagate). Returns -1 when it cannot allocate. */
long ws_sample_stretch(const double *grid, long grid_count, double snap, double t0, double t1,
                       int include_start, int has_fine, double fine_step, double window,
                       double last, long capacity, double *times, int n, const double *lam_raw,
                       const double *V_raw, const double *z0_raw, const double *b_raw,
                       double *taus, double *out, double end_tau, double *end_state)
{
    if (end_state && ws_states_at(n, 1, 1, lam_raw, V_raw, z0_raw, b_raw, &end_tau, end_state) < 0)
        return -1;
    double low = include_start ? t0 - snap : t0 + snap;
    double high = t1 - snap;
    long lo = bisect_left(grid, grid_count, low), hi = bisect_left(grid, grid_count, high);
    long long k0 = 0, k1 = 0;
    if (has_fine) {
        long long first = (long long)floor((t0 - last) / fine_step);
        if (first < 1)
            first = 1;
        double stop = fmin(t1, last + window);
        long long end = (long long)floor((stop - last) / fine_step) + 1;
        double top = fmin(last + window, high);
        k0 = first;
        k1 = end;
        while (k0 < k1 && last + fine_step * (double)k0 < low)
            k0++;
        while (k1 > k0 && !(last + fine_step * (double)(k1 - 1) < top))
            k1--;
    }
    long count = 0;
    if (k1 <= k0) {
        count = hi - lo;
        if (count <= capacity)
            for (long j = 0; j < count; j++)
                times[j] = grid[lo + j];
    } else if (hi == lo && fine_step > snap) {
        count = (long)(k1 - k0);
        if (count <= capacity)
            for (long j = 0; j < count; j++)
                times[j] = last + fine_step * (double)(k0 + j);
    } else {
        /* merge the two sorted runs; keep a time more than `snap` after its predecessor */
        long i = lo;
        long long k = k0;
        double previous = 0.0;
        int started = 0;
        while (i < hi || k < k1) {
            double fine = k < k1 ? last + fine_step * (double)k : 0.0;
            double t;
            if (k >= k1 || (i < hi && grid[i] <= fine))
                t = grid[i++];
            else {
                t = fine;
                k++;
            }
            if (!started || t - previous > snap) {
                if (count < capacity)
                    times[count] = t;
                count++;
            }
            previous = t;
            started = 1;
        }
    }
    if (count > capacity || count == 0)
        return count;
    for (long j = 0; j < count; j++)
        taus[j] = times[j] - t0;
    if (ws_states_at(n, count, capacity, lam_raw, V_raw, z0_raw, b_raw, taus, out) < 0)
        return -1;
    return count;
}
