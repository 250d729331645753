/* Every refusal path, from C: NULL handles and out parameters, wrong channel counts, frames above the
 * maximum, struct_size too small, unknown enum values, an invalid plan, an IR that does not fit, double
 * destroy through the same variable, a control taken twice. Each returns its code; non-real-time calls
 * also leave a message. */
#include "check.h"

#define CHECK_MESSAGE(call, want)                                                                          \
    do {                                                                                                   \
        CHECK_CODE(call, want);                                                                            \
        CHECK(strlen(partita_last_error_message()) > 0, "%s left no message", #call);                      \
    } while (0)

int main(void) {
    PartitaPlanOptions po;
    PartitaEngineOptions eo;
    PartitaPlan *plan = NULL;
    PartitaEngine *e = NULL;
    PartitaControl *ctl = NULL, *ctl2 = NULL;
    PartitaPrepared *prep = NULL;
    PartitaEngineStatus st;
    PartitaEvent ev;
    PartitaPlanInfo pi;
    float h[64], x[2048], y[2048], h2[200];
    const float *hc[2], *in[2];
    float *out[2];
    int i;

    for (i = 0; i < 64; i++) h[i] = (float)(64 - i) / 64.0f;
    for (i = 0; i < 200; i++) h2[i] = 0.01f;
    memset(x, 0, sizeof x);
    hc[0] = h;
    hc[1] = h;

    /* names and messages */
    CHECK(strcmp(partita_error_name(PARTITA_ERR_NULL), "PARTITA_ERR_NULL") == 0, "name");
    CHECK(strcmp(partita_error_name(9999), "PARTITA_ERR_UNKNOWN") == 0, "unknown code name");

    /* plans */
    memset(&po, 0, sizeof po);
    po.struct_size = sizeof po;
    po.ir_frames = 0;
    CHECK_MESSAGE(partita_plan_create(&po, &plan), PARTITA_ERR_PLAN);
    CHECK(plan == NULL, "no plan on failure");
    CHECK_MESSAGE(partita_plan_create(NULL, &plan), PARTITA_ERR_NULL);
    po.ir_frames = 64;
    CHECK_MESSAGE(partita_plan_create(&po, NULL), PARTITA_ERR_NULL);
    po.schedule = 42;
    CHECK_MESSAGE(partita_plan_create(&po, &plan), PARTITA_ERR_INVALID_ARGUMENT);
    po.schedule = PARTITA_SCHEDULE_SYNC;
    po.routing = 99;
    CHECK_MESSAGE(partita_plan_create(&po, &plan), PARTITA_ERR_INVALID_ARGUMENT);
    po.routing = PARTITA_ROUTING_MONO;
    po.struct_size = 4;
    CHECK_MESSAGE(partita_plan_create(&po, &plan), PARTITA_ERR_STRUCT_SIZE);
    po.struct_size = sizeof po;
    po.block_frames = 16;
    CHECK_CODE(partita_plan_create(&po, &plan), PARTITA_OK);
    CHECK(strlen(partita_last_error_message()) == 0, "a successful call clears the message");
    CHECK_CODE(partita_plan_info(NULL, &pi), PARTITA_ERR_NULL);
    pi.struct_size = 0;
    CHECK_CODE(partita_plan_info(plan, &pi), PARTITA_ERR_STRUCT_SIZE);

    /* engines */
    memset(&eo, 0, sizeof eo);
    eo.struct_size = sizeof eo;
    eo.max_host_frames = 256;
    CHECK_MESSAGE(partita_engine_create(plan, NULL, 1, 64, 48000, &eo, &e), PARTITA_ERR_NULL);
    CHECK_MESSAGE(partita_engine_create(plan, hc, 0, 64, 48000, &eo, &e), PARTITA_ERR_LENGTH);
    CHECK_MESSAGE(partita_engine_create(plan, hc, 1, 64, 48000, NULL, &e), PARTITA_ERR_NULL);
    CHECK_MESSAGE(partita_engine_create(plan, hc, 1, 64, 0, &eo, &e), PARTITA_ERR_IR);
    hc[0] = h2; /* 200 taps, longer than the plan's 64 */
    CHECK_MESSAGE(partita_engine_create(plan, hc, 1, 200, 48000, &eo, &e), PARTITA_ERR_ENGINE);
    hc[0] = h;
    eo.routing = PARTITA_ROUTING_TRUE_STEREO;
    CHECK_MESSAGE(partita_engine_create(plan, hc, 1, 64, 48000, &eo, &e), PARTITA_ERR_ENGINE);
    eo.routing = 77;
    CHECK_MESSAGE(partita_engine_create(plan, hc, 1, 64, 48000, &eo, &e), PARTITA_ERR_INVALID_ARGUMENT);
    eo.routing = PARTITA_ROUTING_MONO;
    eo.max_host_frames = 0;
    CHECK_MESSAGE(partita_engine_create(plan, hc, 1, 64, 48000, &eo, &e), PARTITA_ERR_INVALID_ARGUMENT);
    eo.max_host_frames = 256;
    CHECK_MESSAGE(partita_engine_create_from_wav(NULL, "/nonexistent/partita-ir.wav", 48000, &eo, &e), PARTITA_ERR_IO);
    CHECK(e == NULL, "no engine on failure");
    CHECK_CODE(partita_engine_create(plan, hc, 1, 64, 48000, &eo, &e), PARTITA_OK);

    /* process: real-time calls return codes only */
    in[0] = x;
    out[0] = y;
    CHECK_CODE(partita_engine_process(NULL, in, 1, out, 1, 64), PARTITA_ERR_NULL);
    CHECK_CODE(partita_engine_process(e, NULL, 1, out, 1, 64), PARTITA_ERR_NULL);
    CHECK_CODE(partita_engine_process(e, in, 2, out, 1, 64), PARTITA_ERR_LENGTH);
    CHECK_CODE(partita_engine_process(e, in, 1, out, 2, 64), PARTITA_ERR_LENGTH);
    CHECK_CODE(partita_engine_process(e, in, 1, out, 1, 257), PARTITA_ERR_TOO_MANY_FRAMES);
    CHECK_CODE(partita_engine_process(e, in, 1, out, 1, 256), PARTITA_OK);
    CHECK_CODE(partita_engine_process(e, in, 1, out, 1, 0), PARTITA_OK);
    in[0] = NULL;
    CHECK_CODE(partita_engine_process(e, in, 1, out, 1, 64), PARTITA_ERR_NULL);
    CHECK_CODE(partita_engine_process_interleaved(e, x, 2, y, 1, 64), PARTITA_ERR_LENGTH);
    CHECK_CODE(partita_engine_process_interleaved(e, x, 1, y, 1, 1000), PARTITA_ERR_TOO_MANY_FRAMES);
    CHECK_CODE(partita_engine_process_interleaved(e, NULL, 1, y, 1, 64), PARTITA_ERR_NULL);

    /* control */
    CHECK_MESSAGE(partita_engine_take_control(NULL, &ctl), PARTITA_ERR_NULL);
    CHECK_CODE(partita_engine_take_control(e, &ctl), PARTITA_OK);
    CHECK_MESSAGE(partita_engine_take_control(e, &ctl2), PARTITA_ERR_CONTROL_TAKEN);
    CHECK_MESSAGE(partita_control_send(NULL, PARTITA_CMD_WET_GAIN, 1.0), PARTITA_ERR_NULL);
    CHECK_MESSAGE(partita_control_send(ctl, 12345, 1.0), PARTITA_ERR_INVALID_ARGUMENT);
    CHECK_MESSAGE(partita_control_send(ctl, PARTITA_CMD_WET_GAIN, HUGE_VAL), PARTITA_ERR_INVALID_ARGUMENT);
    CHECK_MESSAGE(partita_control_send(ctl, PARTITA_CMD_PREDELAY_FRAMES, 10.0), PARTITA_ERR_INVALID_ARGUMENT);
    CHECK_MESSAGE(partita_control_send(ctl, PARTITA_CMD_PREDELAY_FRAMES, -1.0), PARTITA_ERR_INVALID_ARGUMENT);
    CHECK_CODE(partita_control_send(ctl, PARTITA_CMD_DRY_GAIN, 0.25), PARTITA_OK);
    hc[0] = h2;
    CHECK_MESSAGE(partita_control_prepare(ctl, hc, 1, 200, 48000, &prep), PARTITA_ERR_IR); /* too long */
    hc[0] = h;
    CHECK_MESSAGE(partita_control_prepare(ctl, hc, 1, 64, 44100, &prep), PARTITA_ERR_IR); /* other rate */
    CHECK_MESSAGE(partita_control_prepare(ctl, hc, 2, 64, 48000, &prep), PARTITA_ERR_IR); /* other channels */
    CHECK(prep == NULL, "no prepared IR on failure");
    CHECK_MESSAGE(partita_control_swap(ctl, &prep, 0), PARTITA_ERR_NULL);
    CHECK_MESSAGE(partita_control_swap(ctl, NULL, 0), PARTITA_ERR_NULL);
    CHECK_CODE(partita_control_prepare(ctl, hc, 1, 64, 48000, &prep), PARTITA_OK);
    CHECK_CODE(partita_prepared_destroy(&prep), PARTITA_OK);
    CHECK_MESSAGE(partita_prepared_destroy(&prep), PARTITA_ERR_NULL);
    /* the swap queue holds 4: fill it without processing */
    for (i = 0; i < 4; i++) {
        CHECK_CODE(partita_control_prepare(ctl, hc, 1, 64, 48000, &prep), PARTITA_OK);
        CHECK_CODE(partita_control_swap(ctl, &prep, 0), PARTITA_OK);
    }
    CHECK_CODE(partita_control_prepare(ctl, hc, 1, 64, 48000, &prep), PARTITA_OK);
    CHECK_MESSAGE(partita_control_swap(ctl, &prep, 0), PARTITA_ERR_QUEUE_FULL);
    CHECK(prep != NULL, "a refused swap leaves the prepared IR with the caller");
    CHECK_CODE(partita_prepared_destroy(&prep), PARTITA_OK);

    st.struct_size = 0;
    CHECK_CODE(partita_control_status(ctl, &st), PARTITA_ERR_STRUCT_SIZE);
    CHECK_CODE(partita_control_status(NULL, &st), PARTITA_ERR_NULL);
    st.struct_size = sizeof st;
    CHECK_CODE(partita_control_status(ctl, NULL), PARTITA_ERR_NULL);
    ev.struct_size = 8;
    CHECK_CODE(partita_control_next_event(ctl, &ev), PARTITA_ERR_STRUCT_SIZE);
    CHECK_CODE(partita_control_next_event(NULL, &ev), PARTITA_ERR_NULL);
    ev.struct_size = sizeof ev;
    CHECK_CODE(partita_control_next_event(ctl, &ev), PARTITA_OK);
    CHECK(ev.kind == PARTITA_EVENT_NONE, "no event before processing, got kind %d", ev.kind);

    /* double destroy through the same variable */
    CHECK_CODE(partita_control_destroy(&ctl), PARTITA_OK);
    CHECK(ctl == NULL, "control handle cleared");
    CHECK_MESSAGE(partita_control_destroy(&ctl), PARTITA_ERR_NULL);
    CHECK_CODE(partita_engine_destroy(&e), PARTITA_OK);
    CHECK(e == NULL, "engine handle cleared");
    CHECK_MESSAGE(partita_engine_destroy(&e), PARTITA_ERR_NULL);
    CHECK_MESSAGE(partita_engine_destroy(NULL), PARTITA_ERR_NULL);
    CHECK_CODE(partita_engine_process(e, in, 1, out, 1, 64), PARTITA_ERR_NULL);
    CHECK_CODE(partita_plan_destroy(&plan), PARTITA_OK);
    CHECK_MESSAGE(partita_plan_destroy(&plan), PARTITA_ERR_NULL);

    printf("refusals: %s (%d failures)\n", failures ? "FAILED" : "ok", failures);
    return failures ? 1 : 0;
}
