/*
 * The parallel loop (see include/strayline/parallel.h).
 */
#include "strayline/parallel.h"

#include <pthread.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <unistd.h>

typedef struct pool {
    atomic_size_t next;
    size_t ntasks;
    void (*fn)(size_t, void *);
    void *ctx;
} pool;

static void *worker(void *arg)
{
    pool *p = arg;
    for (;;) {
        size_t t = atomic_fetch_add(&p->next, 1);
        if (t >= p->ntasks)
            break;
        p->fn(t, p->ctx);
    }
    return NULL;
}

int sl_parallel_threads(int requested)
{
    if (requested > 0)
        return requested;
    long n = sysconf(_SC_NPROCESSORS_ONLN);
    if (n < 1)
        n = 1;
    return n > 16 ? 16 : (int)n;
}

void sl_parallel_for(size_t ntasks, int threads, void (*fn)(size_t task, void *ctx), void *ctx)
{
    pool p;
    atomic_init(&p.next, 0);
    p.ntasks = ntasks;
    p.fn = fn;
    p.ctx = ctx;
    if (threads < 1)
        threads = 1;
    if ((size_t)threads > ntasks)
        threads = ntasks ? (int)ntasks : 1;
    pthread_t *tid = threads > 1 ? malloc((size_t)(threads - 1) * sizeof *tid) : NULL;
    int started = 0;
    for (int i = 0; tid && i < threads - 1; i++) {
        if (pthread_create(&tid[i], NULL, worker, &p) != 0)
            break;
        started++;
    }
    worker(&p);
    for (int i = 0; i < started; i++)
        pthread_join(tid[i], NULL);
    free(tid);
}
