/* Renders noise through decaying-noise IRs at random host call sizes (planar, in place and interleaved)
 * and compares with the direct-form convolution (double accumulation) within the project bound, for mono,
 * stereo, true stereo and an engine read from a WAV file. With PARTITA_TEST_ALLOC_COUNT, also checks that
 * process, status and next_event allocate nothing. */
#include "check.h"

#define LEN 24000
#define TAPS 3000
#define MAXF 512

enum { MODE_PLANAR, MODE_IN_PLACE, MODE_INTERLEAVED };

static PartitaPlan *make_plan(int32_t routing) {
    PartitaPlanOptions o;
    PartitaPlan *plan = NULL;
    PartitaPlanInfo info;
    memset(&o, 0, sizeof o);
    o.struct_size = sizeof o;
    o.sample_rate_hz = 48000;
    o.ir_frames = TAPS;
    o.block_frames = 64;
    o.routing = routing;
    o.schedule = PARTITA_SCHEDULE_AUTO;
    CHECK_CODE(partita_plan_create(&o, &plan), PARTITA_OK);
    memset(&info, 0, sizeof info);
    info.struct_size = sizeof info;
    CHECK_CODE(partita_plan_info(plan, &info), PARTITA_OK);
    CHECK(info.block_frames == 64 && info.latency_frames == 64, "block %u latency %llu", info.block_frames,
          (unsigned long long)info.latency_frames);
    CHECK(info.levels >= 1 && info.covered_frames >= TAPS, "levels %u covered %llu", info.levels,
          (unsigned long long)info.covered_frames);
    CHECK(info.predicted_load_pct > 0.0 && info.predicted_heaviest_call_pct > 0.0, "load %g heaviest %g",
          info.predicted_load_pct, info.predicted_heaviest_call_pct);
    return plan;
}

/* Runs x (planar, `ins` channels) through the engine at random call sizes into y (`outs` channels). */
static void render(PartitaEngine *e, float **x, uint32_t ins, float **y, uint32_t outs, int mode) {
    size_t done = 0;
    uint32_t c;
    float *inter_in = (float *)malloc(MAXF * ins * sizeof(float));
    float *inter_out = (float *)malloc(MAXF * outs * sizeof(float));
    while (done < LEN) {
        uint32_t n = 1 + rng_below(MAXF), f;
        const float *in[2];
        float *out[2];
        if (n > LEN - done) n = (uint32_t)(LEN - done);
        if (mode == MODE_INTERLEAVED) {
            for (f = 0; f < n; f++)
                for (c = 0; c < ins; c++) inter_in[f * ins + c] = x[c][done + f];
            CHECK_CODE(partita_engine_process_interleaved(e, inter_in, ins, inter_out, outs, n), PARTITA_OK);
            for (f = 0; f < n; f++)
                for (c = 0; c < outs; c++) y[c][done + f] = inter_out[f * outs + c];
        } else {
            for (c = 0; c < outs; c++) {
                out[c] = y[c] + done;
                if (mode == MODE_IN_PLACE) memcpy(out[c], x[c < ins ? c : 0] + done, n * sizeof(float));
            }
            for (c = 0; c < ins; c++) in[c] = mode == MODE_IN_PLACE ? out[c] : x[c] + done;
            CHECK_CODE(partita_engine_process(e, in, ins, out, outs, n), PARTITA_OK);
        }
        done += n;
    }
    free(inter_in);
    free(inter_out);
}

/* ir: ins * outs channels, channel m * outs + n for input m to output n (stereo: channel c for c to c). */
static void run_case(const char *name, int32_t routing, uint32_t ins, uint32_t outs, uint32_t ir_ch, int mode) {
    float *h[4], *x[2], *y[2];
    double *ref[2];
    const float *hc[4];
    uint32_t c, m, n;
    PartitaPlan *plan = make_plan(routing);
    PartitaEngine *e = NULL;
    PartitaEngineOptions eo;
    PartitaEngineInfo info;
    char label[64];
    for (c = 0; c < ir_ch; c++) hc[c] = h[c] = decaying_ir(TAPS, 600.0 + 100.0 * c);
    for (c = 0; c < ins; c++) x[c] = noise(LEN);
    memset(&eo, 0, sizeof eo);
    eo.struct_size = sizeof eo;
    eo.routing = routing;
    eo.max_host_frames = MAXF;
    CHECK_CODE(partita_engine_create(plan, hc, ir_ch, TAPS, 48000, &eo, &e), PARTITA_OK);
    CHECK_CODE(partita_plan_destroy(&plan), PARTITA_OK);
    memset(&info, 0, sizeof info);
    info.struct_size = sizeof info;
    CHECK_CODE(partita_engine_info(e, &info), PARTITA_OK);
    CHECK(info.inputs == ins && info.outputs == outs, "shape %ux%u", info.inputs, info.outputs);
    for (c = 0; c < outs; c++) {
        y[c] = (float *)calloc(LEN, sizeof(float));
        ref[c] = (double *)calloc(LEN, sizeof(double));
    }
    for (n = 0; n < outs; n++)
        for (m = 0; m < ins; m++) {
            if (routing == PARTITA_ROUTING_STEREO && m != n) continue;
            convolve_add(ref[n], x[m], LEN, h[routing == PARTITA_ROUTING_STEREO ? n : m * outs + n], TAPS);
        }
    render(e, x, ins, y, outs, mode);
    for (c = 0; c < outs; c++) {
        snprintf(label, sizeof label, "%s out %u", name, c);
        check_bound(label, y[c], ref[c], LEN, (size_t)info.latency_frames);
        free(y[c]);
        free(ref[c]);
    }
    CHECK_CODE(partita_engine_destroy(&e), PARTITA_OK);
    CHECK(e == NULL, "destroy sets the handle to NULL");
    for (c = 0; c < ir_ch; c++) free(h[c]);
    for (c = 0; c < ins; c++) free(x[c]);
}

/* Writes a mono 32-bit float WAV. */
static int write_wav(const char *path, const float *h, uint32_t frames, uint32_t rate) {
    FILE *f = fopen(path, "wb");
    uint32_t data = frames * 4, riff = 36 + data, fmt_len = 16, byte_rate = rate * 4;
    uint16_t format = 3, channels = 1, align = 4, bits = 32;
    if (!f) return 0;
    fwrite("RIFF", 1, 4, f); fwrite(&riff, 4, 1, f); fwrite("WAVEfmt ", 1, 8, f); fwrite(&fmt_len, 4, 1, f);
    fwrite(&format, 2, 1, f); fwrite(&channels, 2, 1, f); fwrite(&rate, 4, 1, f); fwrite(&byte_rate, 4, 1, f);
    fwrite(&align, 2, 1, f); fwrite(&bits, 2, 1, f); fwrite("data", 1, 4, f); fwrite(&data, 4, 1, f);
    fwrite(h, 4, frames, f);
    return fclose(f) == 0;
}

static void run_wav(const char *dir) {
    char path[512];
    float *h = decaying_ir(TAPS, 500.0), *x = noise(LEN), *y = (float *)calloc(LEN, sizeof(float));
    double *ref = (double *)calloc(LEN, sizeof(double));
    PartitaEngine *e = NULL;
    PartitaEngineOptions eo;
    PartitaEngineInfo info;
    snprintf(path, sizeof path, "%s/ir.wav", dir);
    CHECK(write_wav(path, h, TAPS, 48000), "write %s", path);
    memset(&eo, 0, sizeof eo);
    eo.struct_size = sizeof eo;
    eo.max_host_frames = MAXF;
    CHECK_CODE(partita_engine_create_from_wav(NULL, path, 48000, &eo, &e), PARTITA_OK);
    memset(&info, 0, sizeof info);
    info.struct_size = sizeof info;
    CHECK_CODE(partita_engine_info(e, &info), PARTITA_OK);
    convolve_add(ref, x, LEN, h, TAPS);
    render(e, &x, 1, &y, 1, MODE_PLANAR);
    check_bound("wav mono (auto plan)", y, ref, LEN, (size_t)info.latency_frames);
    CHECK_CODE(partita_engine_destroy(&e), PARTITA_OK);
    free(h); free(x); free(y); free(ref);
}

#ifdef PARTITA_TEST_ALLOC_COUNT
static void run_no_alloc(void) {
    float *h = decaying_ir(TAPS, 600.0), *x = noise(LEN), *y = (float *)calloc(LEN, sizeof(float));
    const float *hc[1];
    PartitaEngine *e = NULL;
    PartitaControl *ctl = NULL;
    PartitaEngineOptions eo;
    PartitaEngineStatus st;
    PartitaEvent ev;
    uint64_t before, after;
    int i;
    hc[0] = h;
    memset(&eo, 0, sizeof eo);
    eo.struct_size = sizeof eo;
    eo.max_host_frames = MAXF;
    CHECK_CODE(partita_engine_create(NULL, hc, 1, TAPS, 48000, &eo, &e), PARTITA_OK);
    CHECK_CODE(partita_engine_take_control(e, &ctl), PARTITA_OK);
    CHECK_CODE(partita_control_send(ctl, PARTITA_CMD_WET_GAIN, 0.5), PARTITA_OK);
    render(e, &x, 1, &y, 1, MODE_PLANAR); /* warm up (and apply the command) */
    memset(&st, 0, sizeof st);
    st.struct_size = sizeof st;
    memset(&ev, 0, sizeof ev);
    ev.struct_size = sizeof ev;
    before = partita_test_allocations();
    render(e, &x, 1, &y, 1, MODE_PLANAR);
    render(e, &x, 1, &y, 1, MODE_INTERLEAVED);
    for (i = 0; i < 100; i++) {
        CHECK_CODE(partita_control_status(ctl, &st), PARTITA_OK);
        CHECK_CODE(partita_control_next_event(ctl, &ev), PARTITA_OK);
    }
    after = partita_test_allocations();
    CHECK(before > 0, "the counting allocator counts (%llu so far)", (unsigned long long)before);
    CHECK(after == before, "process/status/next_event allocated %llu times", (unsigned long long)(after - before));
    CHECK(st.frames_processed == 3 * LEN, "frames processed %llu", (unsigned long long)st.frames_processed);
    printf("no allocation in process, process_interleaved, status, next_event: %llu allocations before, %llu after\n",
           (unsigned long long)before, (unsigned long long)after);
    CHECK_CODE(partita_control_destroy(&ctl), PARTITA_OK);
    CHECK_CODE(partita_engine_destroy(&e), PARTITA_OK);
    free(h); free(x); free(y);
}
#endif

int main(int argc, char **argv) {
    rng_seed(17);
    CHECK(partita_abi_version() == PARTITA_ABI_VERSION, "abi %u", partita_abi_version());
    run_case("mono planar", PARTITA_ROUTING_MONO, 1, 1, 1, MODE_PLANAR);
    run_case("mono in place", PARTITA_ROUTING_MONO, 1, 1, 1, MODE_IN_PLACE);
    run_case("stereo planar", PARTITA_ROUTING_STEREO, 2, 2, 2, MODE_PLANAR);
    run_case("stereo interleaved", PARTITA_ROUTING_STEREO, 2, 2, 2, MODE_INTERLEAVED);
    run_case("true stereo in place", PARTITA_ROUTING_TRUE_STEREO, 2, 2, 4, MODE_IN_PLACE);
    run_case("true stereo interleaved", PARTITA_ROUTING_TRUE_STEREO, 2, 2, 4, MODE_INTERLEAVED);
    run_wav(argc > 1 ? argv[1] : ".");
#ifdef PARTITA_TEST_ALLOC_COUNT
    run_no_alloc();
#endif
    printf("render: %s (%d failures)\n", failures ? "FAILED" : "ok", failures);
    return failures ? 1 : 0;
}
