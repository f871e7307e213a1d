/*
 * strayline: a minimal parallel loop over independent tasks (POSIX threads).
 *
 * Used by the geometry stage, where every organ sample of every beam can be
 * placed independently. Tasks are handed out one at a time through an atomic
 * counter, so uneven tasks (a lens and a 5 L organ) still share the cores.
 */
#ifndef STRAYLINE_PARALLEL_H
#define STRAYLINE_PARALLEL_H

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Number of threads to use: `requested` when positive, else the online
 * processors (at most 16). */
int sl_parallel_threads(int requested);

/* Run fn(task, ctx) for task = 0 .. ntasks-1 on `threads` threads (the
 * caller's thread among them). Falls back to running on the caller's
 * thread alone if threads cannot be started. */
void sl_parallel_for(size_t ntasks, int threads, void (*fn)(size_t task, void *ctx), void *ctx);

#ifdef __cplusplus
}
#endif

#endif
