/* Renders a raw float file through an IR with the Partita C ABI, swapping to a second IR from another
 * thread halfway through.
 *
 *   partita_render IR.wav IR2.wav CHANNELS INPUT.f32 OUTPUT.f32
 *
 * INPUT.f32 and OUTPUT.f32 are raw interleaved 32-bit floats at the IR's rate (sox: `sox in.wav -t f32
 * in.f32`). The IR files are WAV; their channel count chooses the routing (1 mono, 2 mono to stereo or
 * stereo by CHANNELS, 4 true stereo). Build: see the README section "Using Partita from C". */
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "partita.h"

#define CALL_FRAMES 256

struct swap_job {
    PartitaControl *control;
    const char *path;
    int32_t code;
};

/* The control thread: prepare the second IR (reads, resamples and transforms it: not real-time safe),
 * queue the swap with a 50 ms crossfade, the main thread collects the swap event afterwards (it frees the old IR).
 * The detailed error message is per thread, so a failure is reported here. */
static void *swap_thread(void *arg) {
    struct swap_job *job = (struct swap_job *)arg;
    PartitaPrepared *ir = NULL;
    job->code = partita_control_prepare_wav(job->control, job->path, PARTITA_ROUTING_AUTO, &ir);
    if (job->code == PARTITA_OK) {
        job->code = partita_control_swap(job->control, &ir, 2400);
        if (job->code != PARTITA_OK) partita_prepared_destroy(&ir);
    }
    if (job->code != PARTITA_OK)
        fprintf(stderr, "swap to %s: %s: %s\n", job->path, partita_error_name(job->code), partita_last_error_message());
    return NULL;
}

static int fail(const char *what, int32_t code) {
    fprintf(stderr, "%s: %s: %s\n", what, partita_error_name(code), partita_last_error_message());
    return 1;
}

int main(int argc, char **argv) {
    PartitaEngine *engine = NULL;
    PartitaControl *control = NULL;
    PartitaEngineOptions options;
    PartitaEngineInfo info;
    PartitaEvent ev;
    struct swap_job job;
    pthread_t thread;
    int started = 0, swapped = 0;
    long total = 0, frames_in_file, done = 0;
    FILE *in, *out;
    float *x, *y;
    int32_t code;
    uint32_t channels;

    if (argc != 6) {
        fprintf(stderr, "usage: %s IR.wav IR2.wav CHANNELS INPUT.f32 OUTPUT.f32\n", argv[0]);
        return 2;
    }
    channels = (uint32_t)atoi(argv[3]);
    if (channels == 0) {
        fprintf(stderr, "CHANNELS must be a positive number, got %s\n", argv[3]);
        return 2;
    }
    if (partita_abi_version() != PARTITA_ABI_VERSION) {
        fprintf(stderr, "library ABI %u, header %u\n", partita_abi_version(), PARTITA_ABI_VERSION);
        return 1;
    }
    memset(&options, 0, sizeof options);
    options.struct_size = sizeof options;
    options.routing = channels == 2 ? PARTITA_ROUTING_STEREO : PARTITA_ROUTING_AUTO;
    options.max_host_frames = CALL_FRAMES;
    /* This program calls the engine as fast as it can (a file render, not a live stream): offline, worker
     * results are waited for instead of dropped as late. A live host leaves it 0 and sets host_period_frames. */
    options.offline = 1;
    /* A NULL plan: the automatic plan for the IR's length at its rate (0: keep the file's rate). Plan with
     * partita_plan_create for the longest IR you will swap in when the second one is longer. */
    code = partita_engine_create_from_wav(NULL, argv[1], 0, &options, &engine);
    if (code != PARTITA_OK) return fail("engine", code);
    memset(&info, 0, sizeof info);
    info.struct_size = sizeof info;
    partita_engine_info(engine, &info);
    if (channels == 1 && info.inputs == 2) {
        /* A 2-channel IR is stereo by default; with a mono input it is mono to stereo (left, right). */
        partita_engine_destroy(&engine);
        options.routing = PARTITA_ROUTING_MONO_TO_STEREO;
        code = partita_engine_create_from_wav(NULL, argv[1], 0, &options, &engine);
        if (code != PARTITA_OK) return fail("engine", code);
        partita_engine_info(engine, &info);
    }
    if (info.inputs != channels) {
        fprintf(stderr, "the IR's routing takes %u input channels, not %u\n", info.inputs, channels);
        partita_engine_destroy(&engine);
        return 1;
    }
    code = partita_engine_take_control(engine, &control);
    if (code != PARTITA_OK) return fail("control", code);

    in = fopen(argv[4], "rb");
    out = fopen(argv[5], "wb");
    if (!in || !out) {
        perror("open");
        return 1;
    }
    fseek(in, 0, SEEK_END);
    frames_in_file = ftell(in) / (long)(sizeof(float) * channels);
    fseek(in, 0, SEEK_SET);
    x = (float *)calloc((size_t)CALL_FRAMES * info.inputs, sizeof(float));
    y = (float *)calloc((size_t)CALL_FRAMES * info.outputs, sizeof(float));
    /* Render the file plus the latency and a second of tail. */
    total = frames_in_file + (long)info.latency_frames + (long)info.sample_rate_hz;
    job.control = control;
    job.path = argv[2];
    job.code = PARTITA_OK;
    while (done < total) {
        uint32_t n = (uint32_t)(total - done < CALL_FRAMES ? total - done : CALL_FRAMES);
        size_t got = fread(x, sizeof(float) * info.inputs, n, in);
        memset(x + got * info.inputs, 0, (n - got) * info.inputs * sizeof(float));
        /* The audio thread's call: real-time safe, no allocation. */
        code = partita_engine_process_interleaved(engine, x, info.inputs, y, info.outputs, n);
        if (code != PARTITA_OK) return fail("process", code);
        fwrite(y, sizeof(float) * info.outputs, n, out);
        done += n;
        if (!started && done >= frames_in_file / 2) {
            started = pthread_create(&thread, NULL, swap_thread, &job) == 0;
        }
    }
    if (started) pthread_join(thread, NULL);
    memset(&ev, 0, sizeof ev);
    ev.struct_size = sizeof ev;
    while (partita_control_next_event(control, &ev) == PARTITA_OK && ev.kind != PARTITA_EVENT_NONE) {
        if (ev.kind == PARTITA_EVENT_SWAP) {
            swapped = 1;
            printf("swapped IR: crossfade over output frames %llu..%llu\n",
                   (unsigned long long)ev.swap_fade_start, (unsigned long long)ev.swap_fade_end);
        }
    }
    if (!swapped)
        printf("no swap happened: %s\n",
               !started                  ? "the swap thread did not start"
               : job.code != PARTITA_OK ? "the second IR was refused (above)"
                                         : "the swap did not complete before the render ended");
    printf("rendered %ld frames, latency %llu frames\n", done, (unsigned long long)info.latency_frames);
    fclose(in);
    fclose(out);
    free(x);
    free(y);
    partita_control_destroy(&control);
    partita_engine_destroy(&engine);
    return 0;
}
