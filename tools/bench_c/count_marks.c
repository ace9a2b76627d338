/* Instruction-count markers for tools/bench_model.py: valgrind client requests callable through ctypes.
 *
 * Owns nothing the host uses. bench_model.py builds it as a shared library and loads it in a
 * child process that runs under `valgrind --tool=callgrind --instr-atstart=no`: Python's start and
 * the imports then run without instrumentation (fast), and the child switches counting on only
 * around the kernel calls it wants counted, dumping one profile per call. Outside valgrind the
 * requests do nothing.
 */
#include <valgrind/callgrind.h>

void count_start(void) { CALLGRIND_START_INSTRUMENTATION; }

void count_zero(void) { CALLGRIND_ZERO_STATS; }

void count_dump(const char *label) { CALLGRIND_DUMP_STATS_AT(label); }
