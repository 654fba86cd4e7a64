/*
 * Counts guest instructions executed between two marker addresses, for
 * `cargo xtask target-bench`. A QEMU TCG plugin (plugin API version 1, as accepted by QEMU 7.2).
 *
 * Arguments: start=<hex address>, end=<hex address>, out=<file>. Every time the instruction at
 * `start` is about to execute, the running count is noted; every time the one at `end` is, the
 * difference is appended to <file>, one number a line.
 *
 * With profile=<k> (for `cargo xtask target-profile`), the instructions executed inside the k-th
 * measured window (counting from 0) are also counted per address, and <file> receives
 * "<hex address> <count>" lines for them when QEMU exits. A callback per instruction: slow, for
 * one run of the benchmark.
 *
 * The few declarations of the plugin interface this needs are written out below (the
 * distribution ships no plugin header).
 */
#include <inttypes.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

typedef uint64_t qemu_plugin_id_t;
typedef struct qemu_info_t qemu_info_t;
struct qemu_plugin_tb;
struct qemu_plugin_insn;

enum qemu_plugin_cb_flags { QEMU_PLUGIN_CB_NO_REGS, QEMU_PLUGIN_CB_R_REGS, QEMU_PLUGIN_CB_RW_REGS };
enum qemu_plugin_op { QEMU_PLUGIN_INLINE_ADD_U64 };

typedef void (*qemu_plugin_vcpu_tb_trans_cb_t)(qemu_plugin_id_t id, struct qemu_plugin_tb *tb);
typedef void (*qemu_plugin_vcpu_udata_cb_t)(unsigned int vcpu_index, void *userdata);
typedef void (*qemu_plugin_udata_cb_t)(qemu_plugin_id_t id, void *userdata);

void qemu_plugin_register_vcpu_tb_trans_cb(qemu_plugin_id_t id, qemu_plugin_vcpu_tb_trans_cb_t cb);
size_t qemu_plugin_tb_n_insns(const struct qemu_plugin_tb *tb);
struct qemu_plugin_insn *qemu_plugin_tb_get_insn(const struct qemu_plugin_tb *tb, size_t idx);
uint64_t qemu_plugin_insn_vaddr(const struct qemu_plugin_insn *insn);
void qemu_plugin_register_vcpu_insn_exec_cb(struct qemu_plugin_insn *insn, qemu_plugin_vcpu_udata_cb_t cb,
                                            enum qemu_plugin_cb_flags flags, void *userdata);
void qemu_plugin_register_vcpu_insn_exec_inline(struct qemu_plugin_insn *insn, enum qemu_plugin_op op,
                                                void *ptr, uint64_t imm);
void qemu_plugin_register_atexit_cb(qemu_plugin_id_t id, qemu_plugin_udata_cb_t cb, void *userdata);

__attribute__((visibility("default"))) int qemu_plugin_version = 1;

static uint64_t executed;
static uint64_t mark;
static uint64_t start_addr, end_addr;
static FILE *out;

/* Profile mode: the window profiled, the windows begun so far, whether inside the profiled
 * one, and an open-addressing table of addresses and counts. */
#define SLOTS (1u << 16)
static long profiled = -1;
static long windows;
static int inside;
static uint64_t slot_pc[SLOTS], slot_n[SLOTS];

static void at_start(unsigned int vcpu, void *u) {
    (void)vcpu; (void)u;
    mark = executed;
    inside = (windows == profiled);
    windows++;
}

static void at_end(unsigned int vcpu, void *u) {
    (void)vcpu; (void)u;
    inside = 0;
    if (profiled < 0) {
        fprintf(out, "%" PRIu64 "\n", executed - mark);
        fflush(out);
    }
}

static void at_insn(unsigned int vcpu, void *u) {
    (void)vcpu;
    if (!inside) return;
    uint64_t pc = (uint64_t)(uintptr_t)u;
    uint32_t h = (uint32_t)((pc >> 1) * 2654435761u) & (SLOTS - 1);
    for (uint32_t probe = 0; probe < SLOTS; probe++, h = (h + 1) & (SLOTS - 1)) {
        if (slot_n[h] == 0) slot_pc[h] = pc;
        if (slot_pc[h] == pc) { slot_n[h]++; return; }
    }
}

static void on_translate(qemu_plugin_id_t id, struct qemu_plugin_tb *tb) {
    (void)id;
    size_t n = qemu_plugin_tb_n_insns(tb);
    for (size_t i = 0; i < n; i++) {
        struct qemu_plugin_insn *insn = qemu_plugin_tb_get_insn(tb, i);
        uint64_t pc = qemu_plugin_insn_vaddr(insn);
        /* Callbacks run before the instruction; the inline count is added after the marks. */
        if (pc == start_addr) qemu_plugin_register_vcpu_insn_exec_cb(insn, at_start, QEMU_PLUGIN_CB_NO_REGS, NULL);
        if (pc == end_addr) qemu_plugin_register_vcpu_insn_exec_cb(insn, at_end, QEMU_PLUGIN_CB_NO_REGS, NULL);
        qemu_plugin_register_vcpu_insn_exec_inline(insn, QEMU_PLUGIN_INLINE_ADD_U64, &executed, 1);
        if (profiled >= 0)
            qemu_plugin_register_vcpu_insn_exec_cb(insn, at_insn, QEMU_PLUGIN_CB_NO_REGS, (void *)(uintptr_t)pc);
    }
}

static void at_exit(qemu_plugin_id_t id, void *u) {
    (void)id; (void)u;
    if (!out) return;
    if (profiled >= 0)
        for (uint32_t i = 0; i < SLOTS; i++)
            if (slot_n[i]) fprintf(out, "%" PRIx64 " %" PRIu64 "\n", slot_pc[i], slot_n[i]);
    fclose(out);
}

__attribute__((visibility("default")))
int qemu_plugin_install(qemu_plugin_id_t id, const qemu_info_t *info, int argc, char **argv) {
    (void)info;
    const char *path = NULL;
    for (int i = 0; i < argc; i++) {
        if (strncmp(argv[i], "start=", 6) == 0) start_addr = strtoull(argv[i] + 6, NULL, 0);
        else if (strncmp(argv[i], "end=", 4) == 0) end_addr = strtoull(argv[i] + 4, NULL, 0);
        else if (strncmp(argv[i], "out=", 4) == 0) path = argv[i] + 4;
        else if (strncmp(argv[i], "profile=", 8) == 0) profiled = strtol(argv[i] + 8, NULL, 0);
        else { fprintf(stderr, "insn_count: unknown argument %s\n", argv[i]); return -1; }
    }
    if (!start_addr || !end_addr || !path) {
        fprintf(stderr, "insn_count: needs start=, end= and out=\n");
        return -1;
    }
    /* Thumb symbols carry bit 0; instruction addresses do not. */
    start_addr &= ~(uint64_t)1;
    end_addr &= ~(uint64_t)1;
    out = fopen(path, "w");
    if (!out) { perror("insn_count"); return -1; }
    qemu_plugin_register_vcpu_tb_trans_cb(id, on_translate);
    qemu_plugin_register_atexit_cb(id, at_exit, NULL);
    return 0;
}
