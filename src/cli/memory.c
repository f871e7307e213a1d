/*
 * How a command that works through one case takes its memory.
 *
 * locate and estimate on a large structure set touch about 90 MB once: the
 * contour points, the slices, the samples, the fans and the placements.
 * Such a command asks glibc to take memory in large steps from one heap (a
 * single arena, a large top pad, the large buffers from the heap too), so
 * that memory one stage frees is reused by the next instead of being handed
 * back and faulted in again. The heap is reserved, not touched: the
 * resident memory stays what the command uses.
 *
 * Transparent huge pages on that heap were asked for too, until they were
 * measured against a command run once, as a user runs it: this kind of
 * virtual machine hands memory left free for a few seconds back to its host,
 * and a huge page touched after such a pause cost several times its 4 KiB
 * pages (DEVELOPERS.md, Benchmarks).
 *
 * A long-running command (scan, listen) keeps glibc's defaults: its pages
 * are reused from plan to plan, and its worker threads screen faster with
 * an arena each (measured: one arena made a scan 15 % slower).
 *
 * All of it is advice: under a leak checker that replaces malloc the calls
 * change nothing and the command runs as before. Under a limit on the data
 * segment or the address space (ulimit -d, -v) nothing is changed either:
 * the reserved top pad counts against such a limit, and a command that
 * fitted in it must still fit.
 */
#include <malloc.h>
#include <sys/resource.h>

#include "cli.h"

void sl_cli_memory_one_case(void)
{
    struct rlimit lim;
    if ((getrlimit(RLIMIT_DATA, &lim) == 0 && lim.rlim_cur != RLIM_INFINITY) ||
        (getrlimit(RLIMIT_AS, &lim) == 0 && lim.rlim_cur != RLIM_INFINITY))
        return;
    /* the largest threshold glibc takes: buffers below it (a 17 MB file's
     * bytes, say) come from the heap, and are reused from it */
    mallopt(M_MMAP_THRESHOLD, 32 << 20);
    mallopt(M_TOP_PAD, 256 << 20);
    mallopt(M_ARENA_MAX, 1);
}
