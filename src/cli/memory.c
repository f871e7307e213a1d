/*
 * How a command that works through one case takes its memory.
 *
 * locate and estimate on a large structure set touch about 100 MB once: the
 * file's bytes, the contour points, the slices, the samples and the fans.
 * Each new 4 KiB page costs a page fault, and on a virtual machine a fault
 * is dear: on the benchmark's case (40 ROIs, 0.85 million contour points)
 * `locate` took 27 000 faults, a sixth of its processor time in the kernel.
 * Such a command therefore asks glibc to take memory in large steps from
 * one heap (a single arena, a large top pad, the large buffers from the
 * heap too) and asks the kernel for transparent huge pages on that heap, so
 * that one fault brings 2 MiB. The heap is reserved, not touched: the
 * resident memory stays what the command uses.
 *
 * A long-running command (scan, listen) keeps glibc's defaults: its pages
 * are reused from plan to plan, and its worker threads screen faster with
 * an arena each (measured: one arena made a scan 15 % slower).
 *
 * All of it is advice: with huge pages off in the kernel, or under a leak
 * checker that replaces malloc, the calls change nothing and the command
 * runs as before. Under a limit on the data segment or the address space
 * (ulimit -d, -v) nothing is changed either: the reserved top pad counts
 * against such a limit, and a command that fitted in it must still fit.
 */
#include <malloc.h>
#include <stdint.h>
#include <stdlib.h>
#include <sys/mman.h>
#include <sys/resource.h>
#include <unistd.h>

#include "cli.h"

#define HUGE_PAGE ((uintptr_t)2 << 20)

void sl_cli_memory_one_case(void)
{
    struct rlimit lim;
    if ((getrlimit(RLIMIT_DATA, &lim) == 0 && lim.rlim_cur != RLIM_INFINITY) ||
        (getrlimit(RLIMIT_AS, &lim) == 0 && lim.rlim_cur != RLIM_INFINITY))
        return;
    /* the largest threshold glibc takes: buffers below it (a 17 MB file's
     * bytes, say) come from the heap, which has huge pages */
    mallopt(M_MMAP_THRESHOLD, 32 << 20);
    mallopt(M_TOP_PAD, 256 << 20);
    mallopt(M_ARENA_MAX, 1);
    /* grow the heap now, by the top pad, and advise its aligned part */
    char *lo = sbrk(0);
    /* volatile: a malloc whose block nobody uses may be left out by the
     * compiler, and the heap would not grow */
    char *volatile p = malloc(HUGE_PAGE);
    free(p);
    char *hi = sbrk(0); /* after the free, which may trim the top */
    if (lo == (char *)-1 || hi == (char *)-1)
        return;
    uintptr_t a = ((uintptr_t)lo + HUGE_PAGE - 1) & ~(HUGE_PAGE - 1);
    if ((uintptr_t)hi > a)
        (void)madvise((void *)a, (uintptr_t)hi - a, MADV_HUGEPAGE);
}
