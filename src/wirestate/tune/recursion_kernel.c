/* The linear recursion behind the tuning NLP's trajectories and their sensitivities.
 *
 * S[k+1] = P S[k] + R[k], k = 0 .. steps-1, where P is n x n and each S[k], R[k] is
 * n x m (row-major, the m columns contiguous): the states (m = 1), their forward
 * sensitivities (m directions) or, with P transposed and time reversed, their adjoints.
 * wirestate/tune/recursion.py is the specification (its numpy loop is the fallback and the
 * reference in the tests); this file only removes the per-sample overhead of that loop.
 *
 * With fewer than four columns each entry of S[k+1] is a dot product of a row of P with a
 * column of S[k], summed in four interleaved partial sums (independent additions the
 * processor can overlap). With four or more, four neighbouring columns of a row of S[k+1]
 * are summed together, each over the row of P in order: the four sums are independent and
 * their loads contiguous, which the compiler turns into vector instructions (measured on a
 * 24-state loop, 500 steps: 16 columns 1.78 -> 0.95 ms, 32 columns 3.4 -> 2.0 ms, against
 * numpy's 3.0 ms).
 *
 * Rows of S[k+1] are computed two (fewer than four columns) or four at a time, sharing the
 * loads of S[k] and giving the processor more independent sums than one row's chain of
 * dependent additions; every entry is still summed in the same order, so the results are
 * the same to the bit (measured, same loop: 1 column 0.126 -> 0.092 ms, 4 columns 0.25 ->
 * 0.19 ms, 33 columns 2.2 -> 1.6 ms).
 */

/* Rows p and q (q may be NULL) of P against every column of S, in four partial sums */
static void dot_rows(int n, int m, const double *p, const double *q, const double *s,
                     const double *r, const double *rq, double *out, double *outq)
{
    for (int j = 0; j < m; ++j) {
        const double *c = s + j;
        double a0 = 0.0, a1 = 0.0, a2 = 0.0, a3 = 0.0;
        double b0 = 0.0, b1 = 0.0, b2 = 0.0, b3 = 0.0;
        int l = 0;
        for (; l + 3 < n; l += 4) {
            const double c0 = c[(long)l * m], c1 = c[(long)(l + 1) * m];
            const double c2 = c[(long)(l + 2) * m], c3 = c[(long)(l + 3) * m];
            a0 += p[l] * c0;
            a1 += p[l + 1] * c1;
            a2 += p[l + 2] * c2;
            a3 += p[l + 3] * c3;
            if (q) {
                b0 += q[l] * c0;
                b1 += q[l + 1] * c1;
                b2 += q[l + 2] * c2;
                b3 += q[l + 3] * c3;
            }
        }
        for (; l < n; ++l) {
            a0 += p[l] * c[(long)l * m];
            if (q)
                b0 += q[l] * c[(long)l * m];
        }
        out[j] = r[j] + ((a0 + a1) + (a2 + a3));
        if (q)
            outq[j] = rq[j] + ((b0 + b1) + (b2 + b3));
    }
}

/* rows u < rows (1 or 4) of P, from p on, against four columns of S at a time */
#define ROWS 4
static void row_blocks(int n, int m, int rows, const double *p, const double *s,
                       const double *r, double *out)
{
    int j = 0;
    for (; j + 3 < m; j += 4) {
        double a[ROWS][4];
        for (int u = 0; u < rows; ++u)
            for (int v = 0; v < 4; ++v)
                a[u][v] = r[(long)u * m + j + v];
        if (rows == ROWS) {
            const double *p1 = p + n, *p2 = p + 2 * (long)n, *p3 = p + 3 * (long)n;
            for (int l = 0; l < n; ++l) {
                const double *c = s + (long)l * m + j;
                const double c0 = c[0], c1 = c[1], c2 = c[2], c3 = c[3];
                const double w0 = p[l], w1 = p1[l], w2 = p2[l], w3 = p3[l];
                a[0][0] += w0 * c0; a[0][1] += w0 * c1; a[0][2] += w0 * c2; a[0][3] += w0 * c3;
                a[1][0] += w1 * c0; a[1][1] += w1 * c1; a[1][2] += w1 * c2; a[1][3] += w1 * c3;
                a[2][0] += w2 * c0; a[2][1] += w2 * c1; a[2][2] += w2 * c2; a[2][3] += w2 * c3;
                a[3][0] += w3 * c0; a[3][1] += w3 * c1; a[3][2] += w3 * c2; a[3][3] += w3 * c3;
            }
        } else {
            for (int l = 0; l < n; ++l) {
                const double w = p[l], *c = s + (long)l * m + j;
                a[0][0] += w * c[0]; a[0][1] += w * c[1]; a[0][2] += w * c[2]; a[0][3] += w * c[3];
            }
        }
        for (int u = 0; u < rows; ++u)
            for (int v = 0; v < 4; ++v)
                out[(long)u * m + j + v] = a[u][v];
    }
    for (; j < m; ++j)
        for (int u = 0; u < rows; ++u) {
            double a = r[(long)u * m + j];
            for (int l = 0; l < n; ++l)
                a += p[(long)u * n + l] * s[(long)l * m + j];
            out[(long)u * m + j] = a;
        }
}

void ws_linear_recursion(int n, int m, long steps, const double *P, const double *R, double *S)
{
    const long block = (long)n * m;
    for (long k = 0; k < steps; ++k) {
        const double *s = S + k * block;
        double *next = S + (k + 1) * block;
        const double *r = R + k * block;
        int i = 0;
        if (m < 4) {
            for (; i + 1 < n; i += 2)
                dot_rows(n, m, P + (long)i * n, P + (long)(i + 1) * n, s, r + (long)i * m,
                         r + (long)(i + 1) * m, next + (long)i * m, next + (long)(i + 1) * m);
            if (i < n)
                dot_rows(n, m, P + (long)i * n, 0, s, r + (long)i * m, 0, next + (long)i * m, 0);
            continue;
        }
        for (; i + ROWS - 1 < n; i += ROWS)
            row_blocks(n, m, ROWS, P + (long)i * n, s, r + (long)i * m, next + (long)i * m);
        for (; i < n; ++i)
            row_blocks(n, m, 1, P + (long)i * n, s, r + (long)i * m, next + (long)i * m);
    }
}
