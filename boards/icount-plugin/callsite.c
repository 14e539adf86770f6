/*
 * glowcheck's call-site profiler: a QEMU TCG plugin that counts, between two hits of the marker
 * instruction, every guest instruction by its address (self) and charges it to every distinct call
 * site on the guest's call stack (inclusive), exactly: no sampling.
 *
 *   qemu-system-arm ... -plugin ./callsite.so,marker=0x1234,lo=N,hi=M,out=raw.txt,funcs=starts.txt
 *
 * marker=ADDR  the marker instruction (as for icount.c);  lo=N, hi=M  count from marker hit N to
 * hit M (0-based);  out=PATH  where the counts go, one line `PC self inclusive` (hex, decimal);
 * funcs=PATH  function start addresses (hex, one a line): a `bl` to one of them is a call, a `bl`
 * elsewhere is Thumb-1's long branch;  site=PC  (optional) count only inside that call site's extent.
 * A call pushes its return address on a shadow stack of 256; reaching a return address within the
 * top 8 entries pops to it (so tail-returning library routines are followed). Written for the
 * Cortex-M0 measure image; boards/callsite.sh builds, runs and reads it.
 */
#include <inttypes.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <stdint.h>
#include "plugin-api-v1.h"
__attribute__((visibility("default"))) int qemu_plugin_version = GLOWCHECK_PLUGIN_API_VERSION;
const void *qemu_plugin_insn_data(const struct qemu_plugin_insn *insn);
size_t qemu_plugin_insn_size(const struct qemu_plugin_insn *insn);
#define NPC (1u<<20)
static uint64_t selfc[NPC/2], incl[NPC/2];
static uint64_t marker, hits, lo_hit, hi_hit, site_pc, site_ret; static int in_site;
static int on;
static uint32_t stk[256]; static uint32_t site[256]; static int sp;
static const char *outp;
static uint32_t *fstarts; static size_t nfs;
static int is_fstart(uint32_t a) { size_t lo = 0, hi = nfs; while (lo < hi) { size_t m = (lo+hi)/2; if (fstarts[m] < a) lo = m+1; else hi = m; } return lo < nfs && fstarts[lo] == a; }
static void exec_cb(unsigned int v, void *ud) {
  (void)v; uintptr_t u = (uintptr_t)ud; uint32_t pc = u & 0xFFFFFF; uint32_t kind = u >> 24;
  if (pc == marker) { hits++; if (hits - 1 == lo_hit) { on = 1; sp = 0; } if (hits - 1 == hi_hit) on = 0; }
  if (!on) return;
  if (site_pc) {
    if (!in_site) { if (pc == site_pc) { in_site = 1; site_ret = pc + (kind == 1 ? 4 : 2); } else return; }
    else if (pc == site_ret) { in_site = 0; return; }
  }
  // pop on return
  for (int d = sp - 1; d >= 0 && d >= sp - 8; d--) if (stk[d] == pc) { sp = d; break; }
  if (pc/2 < NPC/2) selfc[pc/2]++;
  // inclusive: charge every distinct call site on the stack once
  for (int d = 0; d < sp; d++) { uint32_t s = site[d]; int dup = 0; for (int e = 0; e < d; e++) if (site[e] == s) { dup = 1; break; } if (!dup && s/2 < NPC/2) incl[s/2]++; }
  if (kind && sp < 256) { site[sp] = pc; stk[sp] = pc + (kind == 1 ? 4 : 2); sp++; }
}
static void on_translate(qemu_plugin_id_t id, struct qemu_plugin_tb *tb) {
  (void)id; size_t n = qemu_plugin_tb_n_insns(tb);
  for (size_t i = 0; i < n; i++) {
    struct qemu_plugin_insn *insn = qemu_plugin_tb_get_insn(tb, i);
    uint64_t pc = qemu_plugin_insn_vaddr(insn);
    const uint8_t *d = qemu_plugin_insn_data(insn); size_t sz = qemu_plugin_insn_size(insn);
    uint32_t kind = 0;
    uint16_t h1 = d[0] | d[1] << 8;
    if (sz == 4) { uint16_t h2 = d[2] | d[3] << 8; if ((h1 & 0xF800) == 0xF000 && (h2 & 0xD000) == 0xD000) {
        uint32_t S = (h1 >> 10) & 1, imm10 = h1 & 0x3FF, J1 = (h2 >> 13) & 1, J2 = (h2 >> 11) & 1, imm11 = h2 & 0x7FF;
        uint32_t I1 = !(J1 ^ S), I2 = !(J2 ^ S);
        int32_t off = (int32_t)((S << 24) | (I1 << 23) | (I2 << 22) | (imm10 << 12) | (imm11 << 1));
        if (S) off |= ~((1 << 25) - 1);
        uint32_t tgt = (uint32_t)(pc + 4 + off);
        kind = (!nfs || is_fstart(tgt)) ? 1 : 0; } }
    else if ((h1 & 0xFF87) == 0x4780) kind = 2;
    qemu_plugin_register_vcpu_insn_exec_cb(insn, exec_cb, QEMU_PLUGIN_CB_NO_REGS, (void *)(uintptr_t)((pc & 0xFFFFFF) | (kind << 24)));
  }
}
static void on_exit_(qemu_plugin_id_t id, void *u) { (void)id; (void)u;
  FILE *f = fopen(outp, "w");
  for (uint32_t i = 0; i < NPC/2; i++) if (selfc[i] || incl[i]) fprintf(f, "%x %" PRIu64 " %" PRIu64 "\n", i*2, selfc[i], incl[i]);
  fclose(f);
}
__attribute__((visibility("default"))) int qemu_plugin_install(qemu_plugin_id_t id, const qemu_info_t *info, int argc, char **argv) {
  (void)info;
  for (int i = 0; i < argc; i++) {
    if (!strncmp(argv[i], "marker=", 7)) marker = strtoull(argv[i]+7, 0, 0);
    else if (!strncmp(argv[i], "lo=", 3)) lo_hit = strtoull(argv[i]+3, 0, 0);
    else if (!strncmp(argv[i], "hi=", 3)) hi_hit = strtoull(argv[i]+3, 0, 0);
    else if (!strncmp(argv[i], "out=", 4)) outp = argv[i]+4;
    else if (!strncmp(argv[i], "site=", 5)) site_pc = strtoull(argv[i]+5, 0, 0);
    else if (!strncmp(argv[i], "funcs=", 6)) { FILE *f = fopen(argv[i]+6, "r"); unsigned v; size_t cap = 1 << 16; fstarts = malloc(cap * 4);
        while (f && fscanf(f, "%x", &v) == 1 && nfs < cap) fstarts[nfs++] = v & ~1u;
        if (f) fclose(f); }
  }
  qemu_plugin_register_vcpu_tb_trans_cb(id, on_translate);
  qemu_plugin_register_atexit_cb(id, on_exit_, NULL);
  return 0;
}
