/* Shared helpers of the C tests: a seeded generator, decaying-noise IRs, the direct-form convolution with
 * double accumulation, the error bound, and CHECK. Each test program includes it once. */
#ifndef PARTITA_TEST_CHECK_H
#define PARTITA_TEST_CHECK_H

#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "partita.h"

static int failures = 0;

#define CHECK(cond, ...)                                                                                    \
    do {                                                                                                   \
        if (!(cond)) {                                                                                     \
            fprintf(stderr, "FAIL %s:%d: %s: ", __FILE__, __LINE__, #cond);                                \
            fprintf(stderr, __VA_ARGS__);                                                                  \
            fprintf(stderr, "\n");                                                                         \
            failures++;                                                                                    \
        }                                                                                                  \
    } while (0)

#define CHECK_CODE(call, want)                                                                              \
    do {                                                                                                   \
        int32_t got_ = (call);                                                                             \
        CHECK(got_ == (want), "%s returned %s, want %s (%s)", #call, partita_error_name(got_),            \
              partita_error_name(want), partita_last_error_message());                                    \
    } while (0)

/* xorshift64*: uniform in [-1, 1). */
static uint64_t rng_state = 0x9E3779B97F4A7C15ull;
static inline void rng_seed(uint64_t s) { rng_state = s ? s : 1; }
static inline double rng_uniform(void) {
    rng_state ^= rng_state >> 12;
    rng_state ^= rng_state << 25;
    rng_state ^= rng_state >> 27;
    return (double)((rng_state * 2685821657736338717ull) >> 11) / 4503599627370496.0 - 1.0;
}
static inline uint32_t rng_below(uint32_t n) { return (uint32_t)((rng_uniform() + 1.0) * 0.5 * n) % n; }

static inline float *noise(size_t n) {
    float *x = (float *)malloc(n * sizeof *x);
    size_t i;
    for (i = 0; i < n; i++) x[i] = (float)(0.5 * rng_uniform());
    return x;
}

/* Noise under an exponential decay of time constant tau frames. */
static inline float *decaying_ir(size_t n, double tau) {
    float *h = (float *)malloc(n * sizeof *h);
    size_t i;
    for (i = 0; i < n; i++) h[i] = (float)(rng_uniform() * exp(-(double)i / tau));
    return h;
}

/* y[n] += sum_k h[k] x[n - k] for n < len, double accumulation. */
static inline void convolve_add(double *y, const float *x, size_t len, const float *h, size_t taps) {
    size_t n, k;
    for (n = 0; n < len; n++) {
        double acc = 0.0;
        size_t kmax = n + 1 < taps ? n + 1 : taps;
        for (k = 0; k < kmax; k++) acc += (double)h[k] * (double)x[n - k];
        y[n] += acc;
    }
}

/* The project bound: max |error| <= 2e-6 of the reference peak and relative RMS <= 1e-6, over
 * out[lat..len) against ref[0..len-lat). */
static inline void check_bound(const char *what, const float *out, const double *ref, size_t len, size_t lat) {
    double peak = 0.0, max_err = 0.0, err2 = 0.0, ref2 = 0.0;
    size_t n;
    for (n = lat; n < len; n++) {
        double r = ref[n - lat], e = (double)out[n] - r;
        if (fabs(r) > peak) peak = fabs(r);
        if (fabs(e) > max_err) max_err = fabs(e);
        err2 += e * e;
        ref2 += r * r;
    }
    for (n = 0; n < lat && n < len; n++) CHECK(out[n] == 0.0f, "%s: output frame %zu before the latency is %g", what, n, out[n]);
    CHECK(peak > 0.0, "%s: silent reference", what);
    CHECK(max_err <= 2e-6 * peak, "%s: max error %.3g of peak %.3g", what, max_err, peak);
    CHECK(sqrt(err2 / ref2) <= 1e-6, "%s: relative RMS %.3g", what, sqrt(err2 / ref2));
    printf("%-28s max err / peak %.2e  rel RMS %.2e\n", what, max_err / peak, sqrt(err2 / ref2));
}

#endif
