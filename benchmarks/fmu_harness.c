/* Timing harness for benchmarks/bench_fmu.py: loads an exported FMU's shared object and
 * times fmi2DoStep called from C, next to a bare loop x <- Ad x + Bd u of the same sizes
 * (the matrix-vector limit) measured in the same run.
 *
 * Usage: fmu_harness LIBRARY GUID NX NU NY STEP CALLS REPEATS
 * Prints one JSON object: per-call seconds of each repeat for
 *   "dostep"       fmi2DoStep alone (inputs held),
 *   "master_step"  fmi2SetReal of every input, fmi2DoStep, fmi2GetReal of every output,
 *   "bare"         the bare matrix-vector update,
 * and the final outputs (so the compiler cannot drop the bare loop).
 *
 * Build: $CC -std=c99 -O2 -I<FMI 2.0 headers> fmu_harness.c -o fmu_harness -ldl
 */
#define _POSIX_C_SOURCE 200809L
#include <dlfcn.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "fmi2Functions.h"

#define MAXN 64

static void logger(fmi2ComponentEnvironment env, fmi2String name, fmi2Status status,
                   fmi2String category, fmi2String message, ...) {
    va_list args;
    (void)env;
    (void)status;
    fprintf(stderr, "%s [%s]: ", name, category);
    va_start(args, message);
    vfprintf(stderr, message, args);
    va_end(args);
    fputc('\n', stderr);
}

static double now(void) {
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

static void *need(void *library, const char *name) {
    void *f = dlsym(library, name);
    if (f == NULL) {
        fprintf(stderr, "fmu_harness: %s not found in the library\n", name);
        exit(2);
    }
    return f;
}

int main(int argc, char **argv) {
    void *library;
    fmi2InstantiateTYPE *instantiate;
    fmi2SetupExperimentTYPE *setup;
    fmi2EnterInitializationModeTYPE *enter;
    fmi2ExitInitializationModeTYPE *leave;
    fmi2SetRealTYPE *set_real;
    fmi2GetRealTYPE *get_real;
    fmi2DoStepTYPE *do_step;
    fmi2FreeInstanceTYPE *release;
    fmi2CallbackFunctions callbacks = {logger, calloc, free, NULL, NULL};
    fmi2Component c;
    fmi2ValueReference in_ref[MAXN], out_ref[MAXN];
    double u[MAXN], y[MAXN], x[MAXN], xn[MAXN], Ad[MAXN * MAXN], Bd[MAXN * MAXN];
    int nx, nu, ny, repeats, r, i, j;
    long calls, k;
    double step, t = 0.0, checksum = 0.0;

    if (argc != 9) {
        fprintf(stderr, "usage: fmu_harness LIBRARY GUID NX NU NY STEP CALLS REPEATS\n");
        return 2;
    }
    nx = atoi(argv[3]);
    nu = atoi(argv[4]);
    ny = atoi(argv[5]);
    step = atof(argv[6]);
    calls = atol(argv[7]);
    repeats = atoi(argv[8]);
    if (nx < 1 || nx > MAXN || nu < 1 || nu > MAXN || ny < 1 || ny > MAXN || calls < 1 ||
        repeats < 1 || !(step > 0.0)) {
        fprintf(stderr, "fmu_harness: sizes must be 1..%d, calls, repeats and step > 0\n", MAXN);
        return 2;
    }
    library = dlopen(argv[1], RTLD_NOW | RTLD_LOCAL);
    if (library == NULL) {
        fprintf(stderr, "fmu_harness: %s\n", dlerror());
        return 2;
    }
    instantiate = (fmi2InstantiateTYPE *)need(library, "fmi2Instantiate");
    setup = (fmi2SetupExperimentTYPE *)need(library, "fmi2SetupExperiment");
    enter = (fmi2EnterInitializationModeTYPE *)need(library, "fmi2EnterInitializationMode");
    leave = (fmi2ExitInitializationModeTYPE *)need(library, "fmi2ExitInitializationMode");
    set_real = (fmi2SetRealTYPE *)need(library, "fmi2SetReal");
    get_real = (fmi2GetRealTYPE *)need(library, "fmi2GetReal");
    do_step = (fmi2DoStepTYPE *)need(library, "fmi2DoStep");
    release = (fmi2FreeInstanceTYPE *)need(library, "fmi2FreeInstance");

    /* wirestate's value references: inputs first, then outputs */
    for (i = 0; i < nu; ++i) {
        in_ref[i] = (fmi2ValueReference)i;
        u[i] = 1.0 + 0.5 * i;
    }
    for (i = 0; i < ny; ++i) out_ref[i] = (fmi2ValueReference)(nu + i);

    c = instantiate("bench", fmi2CoSimulation, argv[2], "", &callbacks, fmi2False, fmi2False);
    if (c == NULL || setup(c, fmi2False, 0.0, 0.0, fmi2False, 0.0) != fmi2OK ||
        enter(c) != fmi2OK || leave(c) != fmi2OK || set_real(c, in_ref, nu, u) != fmi2OK) {
        fprintf(stderr, "fmu_harness: the FMU did not start\n");
        return 1;
    }
    /* a stable bare update of the same sizes: contraction 0.5 plus small couplings */
    for (i = 0; i < nx; ++i) {
        x[i] = 0.0;
        for (j = 0; j < nx; ++j) Ad[i * nx + j] = (i == j ? 0.5 : 0.01);
        for (j = 0; j < nu; ++j) Bd[i * nu + j] = 0.001 * (i + j + 1);
    }

    printf("{\"calls\": %ld, \"dostep\": [", calls);
    for (r = 0; r < repeats; ++r) {
        double t0 = now();
        for (k = 0; k < calls; ++k) {
            if (do_step(c, t, step, fmi2True) != fmi2OK) return 1;
            t += step;
        }
        printf("%s%.6e", r ? ", " : "", (now() - t0) / calls);
    }
    printf("], \"master_step\": [");
    for (r = 0; r < repeats; ++r) {
        double t0 = now();
        for (k = 0; k < calls; ++k) {
            set_real(c, in_ref, nu, u);
            if (do_step(c, t, step, fmi2True) != fmi2OK) return 1;
            get_real(c, out_ref, ny, y);
            t += step;
        }
        printf("%s%.6e", r ? ", " : "", (now() - t0) / calls);
    }
    printf("], \"bare\": [");
    for (r = 0; r < repeats; ++r) {
        double t0 = now();
        for (k = 0; k < calls; ++k) {
            for (i = 0; i < nx; ++i) {
                double a = 0.0, b = 0.0;
                for (j = 0; j < nx; ++j) a += Ad[i * nx + j] * x[j];
                for (j = 0; j < nu; ++j) b += Bd[i * nu + j] * u[j];
                xn[i] = a + b;
            }
            memcpy(x, xn, sizeof(double) * nx);
        }
        printf("%s%.6e", r ? ", " : "", (now() - t0) / calls);
    }
    for (i = 0; i < nx; ++i) checksum += x[i];
    get_real(c, out_ref, ny, y);
    printf("], \"outputs\": [");
    for (i = 0; i < ny; ++i) printf("%s%.17g", i ? ", " : "", y[i]);
    printf("], \"bare_checksum\": %.17g}\n", checksum);
    release(c);
    dlclose(library);
    return 0;
}
