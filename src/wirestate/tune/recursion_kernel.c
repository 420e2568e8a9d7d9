/* The linear recursion behind the tuning NLP's trajectories and their sensitivities.
 *
 * S[k+1] = P S[k] + R[k], k = 0 .. steps-1, where P is n x n and each S[k], R[k] is
 * n x m (row-major, the m columns contiguous): the states (m = 1), their forward
 * sensitivities (m directions) or, with P transposed and time reversed, their adjoints.
 * wirestate/tune/recursion.py is the specification (its numpy loop is the fallback and the
 * reference in the tests); this file only removes the per-sample overhead of that loop.
 *
 * Each entry of S[k+1] is a dot product of a row of P with a column of S[k], summed in
 * four interleaved partial sums (independent additions the processor can overlap).
 */

void ws_linear_recursion(int n, int m, long steps, const double *P, const double *R, double *S)
{
    const long block = (long)n * m;
    for (long k = 0; k < steps; ++k) {
        const double *s = S + k * block;
        double *next = S + (k + 1) * block;
        const double *r = R + k * block;
        for (int i = 0; i < n; ++i) {
            const double *p = P + (long)i * n;
            for (int j = 0; j < m; ++j) {
                const double *c = s + j;
                double a0 = 0.0, a1 = 0.0, a2 = 0.0, a3 = 0.0;
                int l = 0;
                for (; l + 3 < n; l += 4) {
                    a0 += p[l] * c[(long)l * m];
                    a1 += p[l + 1] * c[(long)(l + 1) * m];
                    a2 += p[l + 2] * c[(long)(l + 2) * m];
                    a3 += p[l + 3] * c[(long)(l + 3) * m];
                }
                for (; l < n; ++l)
                    a0 += p[l] * c[(long)l * m];
                next[(long)i * m + j] = r[(long)i * m + j] + ((a0 + a1) + (a2 + a3));
            }
        }
    }
}
