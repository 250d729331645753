/* Swaps the IR from a second thread (pthreads) while the first thread processes, and checks the output
 * against the raised-cosine crossfade of the two direct-form references at the frames the swap event
 * reports: w = 0.5 - 0.5 cos(pi (n - start) / (end - start)), out = (1 - w) old + w new. */
#include <pthread.h>
#include <unistd.h>

#include "check.h"

#define LEN 48000
#define TAPS 2000
#define FIRST 8192
#define FADE 2048
#define MAXF 256

static pthread_mutex_t lock = PTHREAD_MUTEX_INITIALIZER;
static pthread_cond_t cond = PTHREAD_COND_INITIALIZER;
static int swap_queued = 0, render_done = 0, event_seen = 0;
static PartitaEvent swap_event;
static PartitaControl *ctl = NULL;
static float *ir_new = NULL;

static void *control_thread(void *arg) {
    PartitaPrepared *prepared = NULL;
    const float *hc[1];
    int done = 0;
    (void)arg;
    hc[0] = ir_new;
    CHECK_CODE(partita_control_prepare(ctl, hc, 1, TAPS, 48000, &prepared), PARTITA_OK);
    CHECK_CODE(partita_control_swap(ctl, &prepared, FADE), PARTITA_OK);
    CHECK(prepared == NULL, "swap takes the prepared IR");
    pthread_mutex_lock(&lock);
    swap_queued = 1;
    pthread_cond_signal(&cond);
    pthread_mutex_unlock(&lock);
    while (!done) {
        PartitaEvent ev;
        memset(&ev, 0, sizeof ev);
        ev.struct_size = sizeof ev;
        CHECK_CODE(partita_control_next_event(ctl, &ev), PARTITA_OK);
        pthread_mutex_lock(&lock);
        if (ev.kind == PARTITA_EVENT_SWAP) {
            swap_event = ev;
            event_seen = 1;
        }
        done = event_seen || render_done;
        pthread_mutex_unlock(&lock);
        if (!done) usleep(200);
    }
    return NULL;
}

static void process_range(PartitaEngine *e, const float *x, float *y, size_t from, size_t to) {
    while (from < to) {
        uint32_t n = 1 + rng_below(MAXF);
        const float *in[1];
        float *out[1];
        if (n > to - from) n = (uint32_t)(to - from);
        in[0] = x + from;
        out[0] = y + from;
        CHECK_CODE(partita_engine_process(e, in, 1, out, 1, n), PARTITA_OK);
        from += n;
    }
}

int main(void) {
    float *h_old, *x, *y;
    double *ref_old, *ref_new, peak = 0.0, max_err = 0.0, err2 = 0.0, ref2 = 0.0;
    const float *hc[1];
    PartitaEngine *e = NULL;
    PartitaEngineOptions eo;
    PartitaEngineInfo info;
    PartitaEngineStatus st;
    pthread_t thread;
    size_t n, lat;
    double fs, fe;

    rng_seed(23);
    h_old = decaying_ir(TAPS, 400.0);
    ir_new = decaying_ir(TAPS, 700.0);
    x = noise(LEN);
    y = (float *)calloc(LEN, sizeof(float));
    ref_old = (double *)calloc(LEN, sizeof(double));
    ref_new = (double *)calloc(LEN, sizeof(double));
    convolve_add(ref_old, x, LEN, h_old, TAPS);
    convolve_add(ref_new, x, LEN, ir_new, TAPS);

    hc[0] = h_old;
    memset(&eo, 0, sizeof eo);
    eo.struct_size = sizeof eo;
    eo.routing = PARTITA_ROUTING_MONO;
    eo.max_host_frames = MAXF;
    CHECK_CODE(partita_engine_create(NULL, hc, 1, TAPS, 48000, &eo, &e), PARTITA_OK);
    CHECK_CODE(partita_engine_take_control(e, &ctl), PARTITA_OK);
    memset(&info, 0, sizeof info);
    info.struct_size = sizeof info;
    CHECK_CODE(partita_engine_info(e, &info), PARTITA_OK);
    lat = (size_t)info.latency_frames;

    process_range(e, x, y, 0, FIRST);
    CHECK(pthread_create(&thread, NULL, control_thread, NULL) == 0, "pthread_create");
    pthread_mutex_lock(&lock);
    while (!swap_queued) pthread_cond_wait(&cond, &lock);
    pthread_mutex_unlock(&lock);
    process_range(e, x, y, FIRST, LEN);
    pthread_mutex_lock(&lock);
    render_done = 1;
    pthread_mutex_unlock(&lock);
    pthread_join(thread, NULL);
    if (!event_seen) {
        memset(&swap_event, 0, sizeof swap_event);
        swap_event.struct_size = sizeof swap_event;
        CHECK_CODE(partita_control_next_event(ctl, &swap_event), PARTITA_OK);
        event_seen = swap_event.kind == PARTITA_EVENT_SWAP;
    }
    CHECK(event_seen, "no swap event after %d frames", LEN);
    memset(&st, 0, sizeof st);
    st.struct_size = sizeof st;
    CHECK_CODE(partita_control_status(ctl, &st), PARTITA_OK);
    CHECK(st.swaps_completed == 1, "swaps completed %llu", (unsigned long long)st.swaps_completed);

    fs = (double)swap_event.swap_fade_start;
    fe = (double)swap_event.swap_fade_end;
    CHECK(swap_event.swap_fade_start >= FIRST, "fade starts at %.0f, before the swap was queued", fs);
    CHECK(fe - fs == FADE, "fade of %.0f frames, asked %d", fe - fs, FADE);
    CHECK(swap_event.swap_fade_end + lat < LEN, "fade ends at %.0f, past the signal", fe);
    CHECK(swap_event.swap_new_id != swap_event.swap_old_id, "ids %llu %llu",
          (unsigned long long)swap_event.swap_new_id, (unsigned long long)swap_event.swap_old_id);
    for (n = lat; n < LEN; n++) {
        double t = (double)n, w, want, err;
        w = t < fs ? 0.0 : t >= fe ? 1.0 : 0.5 - 0.5 * cos(3.14159265358979323846 * (t - fs) / (fe - fs));
        want = (1.0 - w) * ref_old[n - lat] + w * ref_new[n - lat];
        err = (double)y[n] - want;
        if (fabs(want) > peak) peak = fabs(want);
        if (fabs(err) > max_err) max_err = fabs(err);
        err2 += err * err;
        ref2 += want * want;
    }
    CHECK(max_err <= 2e-6 * peak, "crossfade: max error %.3g of peak %.3g", max_err, peak);
    CHECK(sqrt(err2 / ref2) <= 1e-6, "crossfade: relative RMS %.3g", sqrt(err2 / ref2));
    printf("swap from a second thread: fade %.0f..%.0f (picked up at %llu), max err / peak %.2e, rel RMS %.2e\n",
           fs, fe, (unsigned long long)swap_event.swap_picked_up, max_err / peak, sqrt(err2 / ref2));

    CHECK_CODE(partita_control_destroy(&ctl), PARTITA_OK);
    CHECK_CODE(partita_engine_destroy(&e), PARTITA_OK);
    free(h_old); free(ir_new); free(x); free(y); free(ref_old); free(ref_new);
    printf("swap: %s (%d failures)\n", failures ? "FAILED" : "ok", failures);
    return failures ? 1 : 0;
}
