/*
 * The few entry points of QEMU's TCG plugin interface that glowcheck's instruction counter uses,
 * declared by the project because Debian 12 ships qemu-system-arm 7.2 with plugin support but no
 * header for it.
 *
 * Matches: the plugin API of QEMU 7.2, version 1 (QEMU 7.2 accepts plugins that export
 * `qemu_plugin_version` between its minimum, 0, and its current version, 1, and refuses any other
 * value at load time; `build.sh --check-version` shows that refusal). Only what icount.c needs is
 * declared; every signature here is resolved at load time against the symbols the QEMU binary exports,
 * so a mismatch is a wrong count, not a link error: `boards/measure.sh` checks the counter against a
 * loop of known length and against SysTick on every run.
 */
#ifndef GLOWCHECK_PLUGIN_API_V1_H
#define GLOWCHECK_PLUGIN_API_V1_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

/* The version of the interface these declarations describe; the plugin exports it. */
#define GLOWCHECK_PLUGIN_API_VERSION 1

/* Handle QEMU gives a plugin at install time. */
typedef uint64_t qemu_plugin_id_t;

/* What QEMU tells the plugin about the guest at install time (valid during the call only). */
typedef struct qemu_info_t {
    const char *target_name;
    struct {
        int min;
        int cur;
    } version;
    bool system_emulation;
    union {
        struct {
            int smp_vcpus;
            int max_vcpus;
        } system;
    };
} qemu_info_t;

/* Opaque: a block being translated, and one guest instruction in it. */
struct qemu_plugin_tb;
struct qemu_plugin_insn;

/* Whether a callback reads or writes guest registers (v1 offers no register access at all). */
enum qemu_plugin_cb_flags {
    QEMU_PLUGIN_CB_NO_REGS = 0,
    QEMU_PLUGIN_CB_R_REGS = 1,
    QEMU_PLUGIN_CB_RW_REGS = 2,
};

/* Inline operations: v1 has one, a non-atomic 64-bit add of an immediate to a memory word. */
enum qemu_plugin_op {
    QEMU_PLUGIN_INLINE_ADD_U64 = 0,
};

typedef void (*qemu_plugin_udata_cb_t)(qemu_plugin_id_t id, void *userdata);
typedef void (*qemu_plugin_vcpu_udata_cb_t)(unsigned int vcpu_index, void *userdata);
typedef void (*qemu_plugin_vcpu_tb_trans_cb_t)(qemu_plugin_id_t id, struct qemu_plugin_tb *tb);

/* Exported by the plugin: the interface version it was written for, and its entry point. */
extern __attribute__((visibility("default"))) int qemu_plugin_version;
__attribute__((visibility("default"))) int qemu_plugin_install(qemu_plugin_id_t id,
                                                               const qemu_info_t *info, int argc,
                                                               char **argv);

/* Provided by QEMU. */
void qemu_plugin_register_vcpu_tb_trans_cb(qemu_plugin_id_t id, qemu_plugin_vcpu_tb_trans_cb_t cb);
size_t qemu_plugin_tb_n_insns(const struct qemu_plugin_tb *tb);
struct qemu_plugin_insn *qemu_plugin_tb_get_insn(const struct qemu_plugin_tb *tb, size_t idx);
uint64_t qemu_plugin_insn_vaddr(const struct qemu_plugin_insn *insn);
void qemu_plugin_register_vcpu_insn_exec_inline(struct qemu_plugin_insn *insn,
                                                enum qemu_plugin_op op, void *ptr, uint64_t imm);
void qemu_plugin_register_vcpu_insn_exec_cb(struct qemu_plugin_insn *insn,
                                            qemu_plugin_vcpu_udata_cb_t cb,
                                            enum qemu_plugin_cb_flags flags, void *userdata);
void qemu_plugin_register_atexit_cb(qemu_plugin_id_t id, qemu_plugin_udata_cb_t cb, void *userdata);
void qemu_plugin_outs(const char *string);

#endif
