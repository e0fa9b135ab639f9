/*
 * Replay a log through the C interface and print the trace digest.
 *
 *   replay_digest LOG.upl
 *
 * The navigator lives in a static buffer (no allocation by the library);
 * the configuration comes from the log header, the frames from the
 * host-side log reader. For each command the program asks the library for
 * the decision-trace line rebuilt from the C command struct alone, and
 * folds it into an FNV-1a 64 digest computed here, in C. The digest must
 * equal the one `replay run LOG.upl` prints (the CI checks it against the
 * golden summaries in fixtures/golden/).
 *
 * A second navigator in another static buffer steps the same frames; its
 * commands must match the first one's field for field (no shared state).
 *
 * Build (from the workspace root, after
 * `cargo rustc -p nav-c --lib --crate-type staticlib,cdylib`):
 *   cc -std=c11 -Wall -Wextra -Werror -I nav-c/include \
 *      nav-c/examples/replay_digest.c target/debug/libnav_c.a \
 *      -lpthread -ldl -lm -o target/replay_digest
 */
#define UPC_HOST 1
#include "upcurrent_nav.h"

#include <stdalign.h>
#include <stdio.h>
#include <string.h>

/* Two navigators in static storage, over-sized and over-aligned so the
 * size and alignment checks below are the library's own. */
#define STORAGE_BYTES (256u * 1024u)
static alignas(64) unsigned char storage_a[STORAGE_BYTES];
static alignas(64) unsigned char storage_b[STORAGE_BYTES];

static UpcFrame frame;
static UpcCommand cmd_a, cmd_b;
static char line[64 * 1024];

static uint64_t fnv1a(uint64_t h, const char *p, size_t n) {
    for (size_t i = 0; i < n; i++) {
        h ^= (unsigned char)p[i];
        h *= UINT64_C(0x100000001b3);
    }
    return h;
}

static int fail(const char *what, const UpcError *e) {
    fprintf(stderr, "%s: %s (%d), field '%s': %s\n", what, upc_error_name(e->code), e->code,
            e->field, e->message);
    return 2;
}

int main(int argc, char **argv) {
    if (argc != 2) {
        fprintf(stderr, "usage: %s LOG.upl\n", argv[0]);
        return 2;
    }
    UpcError err;
    size_t need = upc_navigator_size();
    size_t align = upc_navigator_align();
    if (need > STORAGE_BYTES || align > 64) {
        fprintf(stderr, "storage: need %zu bytes aligned to %zu\n", need, align);
        return 2;
    }

    /* A bad configuration is refused with the field at fault. */
    UpcConfig bad = upc_config_default();
    if (upc_navigator_init(storage_a, sizeof storage_a, &bad, &err) != UPC_ERR_BODY ||
        strcmp(err.field, "module_count") != 0) {
        fprintf(stderr, "expected UPC_ERR_BODY on module_count, got %d '%s'\n", err.code,
                err.field);
        return 2;
    }
    if (upc_navigator_step((UpcNavigator *)storage_a, &frame, &cmd_a, &err) !=
        UPC_ERR_NOT_INITIALISED) {
        fprintf(stderr, "a failed init must leave the storage unusable\n");
        return 2;
    }

    UpcLog *log = upc_log_open(argv[1], &err);
    if (!log) return fail("open", &err);
    UpcConfig cfg;
    if (upc_log_config(log, &cfg, &err) != UPC_OK) return fail("config", &err);
    if (upc_navigator_init(storage_a, sizeof storage_a, &cfg, &err) != UPC_OK)
        return fail("init a", &err);
    if (upc_navigator_init(storage_b, sizeof storage_b, &cfg, &err) != UPC_OK)
        return fail("init b", &err);
    UpcNavigator *a = (UpcNavigator *)storage_a;
    UpcNavigator *b = (UpcNavigator *)storage_b;

    uint64_t digest = UINT64_C(0xcbf29ce484222325);
    uint64_t steps = 0;
    int r;
    while ((r = upc_log_next_frame(log, &frame, &err)) == UPC_FRAME) {
        if (upc_navigator_step(a, &frame, &cmd_a, &err) != UPC_OK) return fail("step a", &err);
        if (upc_navigator_step(b, &frame, &cmd_b, &err) != UPC_OK) return fail("step b", &err);
        if (memcmp(&cmd_a.heading_map, &cmd_b.heading_map, sizeof cmd_a.heading_map) != 0 ||
            cmd_a.speed_m_per_s != cmd_b.speed_m_per_s || cmd_a.reason != cmd_b.reason) {
            fprintf(stderr, "step %llu: the two navigators differ\n", (unsigned long long)steps);
            return 1;
        }
        size_t len = 0;
        if (upc_trace_line(&cmd_a, steps, line, sizeof line, &len, &err) != UPC_OK)
            return fail("trace line", &err);
        digest = fnv1a(digest, line, len);
        steps++;
    }
    if (r != UPC_END) return fail("read", &err);
    upc_log_close(log);
    UpcCounters c = upc_navigator_counters(a);
    printf("c_replay steps=%llu ports=%u section_fits=%llu storage_bytes=%zu align=%zu\n",
           (unsigned long long)steps, upc_navigator_ports(a), (unsigned long long)c.section_fits,
           need, align);
    printf("trace digest %016llx\n", (unsigned long long)digest);
    return 0;
}
