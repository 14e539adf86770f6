/*
 * glowcheck's instruction counter: a QEMU TCG plugin that counts every guest instruction executed
 * and writes the running count each time execution reaches one marker address.
 *
 *   qemu-system-arm ... -plugin ./libglowcheck-icount.so,marker=0x1234,out=counts.txt
 *
 * marker=ADDR  address of the marker instruction (decimal or 0x hex; for a Thumb function symbol
 *              clear bit 0 first). Required.
 * out=PATH     file for the counts (default: QEMU's log, which needs `-d plugin`).
 *
 * Output, one line per hit, then one line at exit:
 *   marker HIT COUNT     HIT = 0, 1, 2, ... in execution order; COUNT = instructions executed before
 *                        this execution of the marker instruction
 *   total COUNT HITS     all instructions executed, and the number of marker hits
 *
 * Counting: every instruction except the marker gets an inline 64-bit add of 1, emitted by QEMU
 * before the instruction itself; the marker instruction gets a callback instead that writes the
 * count and then adds the marker's own 1. Per-instruction adds (not one add per translated block)
 * keep the count exact when a block stops early: under `-icount`, a device access inside a block
 * makes QEMU abandon the block after that access and run the rest again as a new block, and it
 * instruments the re-run access instruction for memory callbacks only, so nothing is counted twice.
 * One counter for all vCPUs, so the plugin refuses a guest with more than one.
 */
#include <errno.h>
#include <inttypes.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plugin-api-v1.h"

/* build.sh --check-version builds copies that claim other versions, to see QEMU refuse them. */
#ifdef GLOWCHECK_CLAIM_VERSION
__attribute__((visibility("default"))) int qemu_plugin_version = GLOWCHECK_CLAIM_VERSION;
#else
__attribute__((visibility("default"))) int qemu_plugin_version = GLOWCHECK_PLUGIN_API_VERSION;
#endif

/* Instructions executed so far (the target of every inline add). */
static uint64_t executed;
/* Executions of the marker instruction so far. */
static uint64_t hits;
/* The marker instruction's guest virtual address. */
static uint64_t marker;
/* Where the lines go; NULL means QEMU's log. */
static FILE *out;

static void emit(const char *line)
{
    if (out) {
        fputs(line, out);
    } else {
        qemu_plugin_outs(line);
    }
}

static void on_marker(unsigned int vcpu_index, void *userdata)
{
    char line[64];
    (void)vcpu_index;
    (void)userdata;
    snprintf(line, sizeof line, "marker %" PRIu64 " %" PRIu64 "\n", hits, executed);
    emit(line);
    hits++;
    executed++;
}

static void on_translate(qemu_plugin_id_t id, struct qemu_plugin_tb *tb)
{
    size_t n = qemu_plugin_tb_n_insns(tb);
    (void)id;
    for (size_t i = 0; i < n; i++) {
        struct qemu_plugin_insn *insn = qemu_plugin_tb_get_insn(tb, i);
        if (qemu_plugin_insn_vaddr(insn) == marker) {
            qemu_plugin_register_vcpu_insn_exec_cb(insn, on_marker, QEMU_PLUGIN_CB_NO_REGS, NULL);
        } else {
            qemu_plugin_register_vcpu_insn_exec_inline(insn, QEMU_PLUGIN_INLINE_ADD_U64, &executed, 1);
        }
    }
}

static void on_exit_(qemu_plugin_id_t id, void *userdata)
{
    char line[64];
    (void)id;
    (void)userdata;
    snprintf(line, sizeof line, "total %" PRIu64 " %" PRIu64 "\n", executed, hits);
    emit(line);
    if (out) {
        fclose(out);
        out = NULL;
    }
}

/* Parses an unsigned number (decimal, or hex with 0x); 0 on success. */
static int parse_u64(const char *text, uint64_t *value)
{
    char *end = NULL;
    errno = 0;
    unsigned long long v = strtoull(text, &end, 0);
    if (errno != 0 || end == text || *end != '\0' || text[0] == '-') {
        return -1;
    }
    *value = v;
    return 0;
}

__attribute__((visibility("default"))) int qemu_plugin_install(qemu_plugin_id_t id,
                                                               const qemu_info_t *info, int argc,
                                                               char **argv)
{
    const char *out_path = NULL;
    int have_marker = 0;
    for (int i = 0; i < argc; i++) {
        const char *arg = argv[i];
        if (strncmp(arg, "marker=", 7) == 0 && parse_u64(arg + 7, &marker) == 0) {
            have_marker = 1;
        } else if (strncmp(arg, "out=", 4) == 0 && arg[4] != '\0') {
            out_path = arg + 4;
        } else {
            fprintf(stderr, "glowcheck-icount: unknown or malformed argument '%s' (marker=ADDR, out=PATH)\n", arg);
            return -1;
        }
    }
    if (!have_marker) {
        fprintf(stderr, "glowcheck-icount: marker=ADDR is required\n");
        return -1;
    }
    if (info->system_emulation && info->system.max_vcpus > 1) {
        fprintf(stderr, "glowcheck-icount: one counter for all vCPUs: run with a single vCPU (this guest may have %d)\n",
                info->system.max_vcpus);
        return -1;
    }
    if (out_path) {
        out = fopen(out_path, "w");
        if (!out) {
            fprintf(stderr, "glowcheck-icount: cannot write %s: %s\n", out_path, strerror(errno));
            return -1;
        }
    }
    qemu_plugin_register_vcpu_tb_trans_cb(id, on_translate);
    qemu_plugin_register_atexit_cb(id, on_exit_, NULL);
    return 0;
}
