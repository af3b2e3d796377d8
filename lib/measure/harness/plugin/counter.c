/* offramp's instruction counter, a QEMU TCG plugin (API version 1) built with the host gcc.
 *
 * Every executed guest instruction adds one to a counter (an inline add before the instruction,
 * so an instruction is counted once it starts; exact whatever way a translation block is left).
 * The firmware marks regions with stores into a marker block (harness/trace.c): the word written
 * names the event and its index. Only stores made by instructions inside the marker function are
 * watched, so the rest of the program runs without memory callbacks. Each marker store appends
 * "E <event> <index> <count>" to the output file, and the run's total ends it as "T <count>".
 *
 * Arguments: out=<file>, trace=<lo>:<hi> (the marker function's code), marks=<lo>:<hi> (the block).
 * Layout of the block (shared with trace.c): word = (event << 16) | (index & 0xffff). */
#include <inttypes.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include "api.h"

OFFRAMP_PLUGIN_EXPORT int qemu_plugin_version = 1;

static uint64_t executed;
static uint64_t trace_lo, trace_hi, marks_lo, marks_hi;
static FILE *out;
static int bad_store;

static void on_marker(unsigned int vcpu, qemu_plugin_meminfo_t info, uint64_t vaddr, void *udata) {
  (void)vcpu;
  (void)udata;
  if (!qemu_plugin_mem_is_store(info)) return;
  /* QEMU 7.2 leaves an instruction's memory callbacks armed for the accesses a helper makes after it
   * (the M-profile vector stores of a Cortex-M55 among them): such a store lands here although no
   * marker made it. Only a store into the block is a marker; anything else is ignored. A misaligned
   * store into the block is no marker of trace.c's either, and is flagged. */
  if (vaddr < marks_lo || vaddr >= marks_hi) return;
  if ((vaddr & 3u) != 0) {
    bad_store = 1;
    return;
  }
  uint64_t word = (vaddr - marks_lo) >> 2;
  fprintf(out, "E %" PRIu64 " %" PRIu64 " %" PRIu64 "\n", word >> 16, word & 0xffffu, executed);
}

static void on_translate(qemu_plugin_id_t id, struct qemu_plugin_tb *tb) {
  (void)id;
  size_t n = qemu_plugin_tb_n_insns(tb);
  for (size_t i = 0; i < n; i++) {
    struct qemu_plugin_insn *insn = qemu_plugin_tb_get_insn(tb, i);
    qemu_plugin_register_vcpu_insn_exec_inline(insn, QEMU_PLUGIN_INLINE_ADD_U64, &executed, 1);
    uint64_t pc = qemu_plugin_insn_vaddr(insn);
    if (pc >= trace_lo && pc < trace_hi)
      qemu_plugin_register_vcpu_mem_cb(insn, on_marker, QEMU_PLUGIN_CB_NO_REGS, QEMU_PLUGIN_MEM_W, NULL);
  }
}

static void on_end(qemu_plugin_id_t id, void *udata) {
  (void)id;
  (void)udata;
  if (bad_store) fprintf(out, "X misaligned store into the marker block\n");
  fprintf(out, "T %" PRIu64 "\n", executed);
  fclose(out);
}

static int range(const char *s, uint64_t *lo, uint64_t *hi) {
  char *end;
  *lo = strtoull(s, &end, 0);
  if (*end != ':') return 0;
  *hi = strtoull(end + 1, &end, 0);
  return *end == 0 && *lo < *hi;
}

OFFRAMP_PLUGIN_EXPORT int qemu_plugin_install(qemu_plugin_id_t id, const qemu_info_t *info, int argc, char **argv) {
  (void)info;
  const char *path = NULL;
  int have_trace = 0, have_marks = 0;
  for (int i = 0; i < argc; i++) {
    if (strncmp(argv[i], "out=", 4) == 0) path = argv[i] + 4;
    else if (strncmp(argv[i], "trace=", 6) == 0) have_trace = range(argv[i] + 6, &trace_lo, &trace_hi);
    else if (strncmp(argv[i], "marks=", 6) == 0) have_marks = range(argv[i] + 6, &marks_lo, &marks_hi);
    else {
      fprintf(stderr, "offramp counter: unknown argument %s\n", argv[i]);
      return -1;
    }
  }
  if (!path || !have_trace || !have_marks) {
    fprintf(stderr, "offramp counter: needs out=, trace=lo:hi and marks=lo:hi\n");
    return -1;
  }
  out = fopen(path, "w");
  if (!out) {
    perror(path);
    return -1;
  }
  qemu_plugin_register_vcpu_tb_trans_cb(id, on_translate);
  qemu_plugin_register_atexit_cb(id, on_end, NULL);
  return 0;
}
