/* The linear recursion behind the tuning NLP's trajectories and their sensitivities.
 *
 * S[k+1] = P S[k] + R[k], k = 0 .. steps-1, where P is n x n and each S[k], R[k] is
 * n x m (row-major, the m columns contiguous): the states (m = 1), their forward
 * sensitivities (m directions) or, with P transposed and time reversed, their adjoints.
 * wirestate/tune/recursion.py is the specification (its numpy loop is the fallback and the
 * reference in the tests); this file only removes the per-sample overhead of that loop.
 */

void ws_linear_recursion(int n, int m, long steps, const double *P, const double *R, double *S)
{
    const long block = (long)n * m;
    for (long k = 0; k < steps; ++k) {
        const double *s = S + k * block;
        double *next = S + (k + 1) * block;
        const double *r = R + k * block;
        for (int i = 0; i < n; ++i) {
            double *row = next + (long)i * m;
            const double *p = P + (long)i * n;
            for (int j = 0; j < m; ++j)
                row[j] = r[(long)i * m + j];
            for (int l = 0; l < n; ++l) {
                const double a = p[l];
                const double *sl = s + (long)l * m;
                for (int j = 0; j < m; ++j)
                    row[j] += a * sl[j];
            }
        }
    }
}
