/* qwalloc.h: a counting allocator that can fail on request, interposed on
 * malloc/calloc/realloc/free for one test program (include it in exactly
 * one file of the program).  Two uses:
 *  - "no allocation per reading": qwa_start(-1), run, check qwa.allocs;
 *  - SQLite's allocation-failure sweep: for k = 0, 1, ... make the k-th
 *    allocation fail (qwa_start(k)), run the operation, and check it fails
 *    cleanly with nothing leaked (qwa.live == 0), until a run no longer
 *    reaches allocation k (qwa_injected() == 0).
 * glibc routes its own allocations (fopen, strdup) through these too.
 * Under AddressSanitizer the allocator belongs to the sanitizer: QWA_ACTIVE
 * is 0 and the tests that need the gate skip. */
#ifndef QW_QWALLOC_H
#define QW_QWALLOC_H

#include <stddef.h>

#if defined(__SANITIZE_ADDRESS__)
#define QWA_ACTIVE 0
#elif defined(__has_feature)
#if __has_feature(address_sanitizer)
#define QWA_ACTIVE 0
#else
#define QWA_ACTIVE 1
#endif
#else
#define QWA_ACTIVE 1
#endif

static struct {
	long allocs;  /* allocations (and reallocs) since qwa_start */
	long live;    /* blocks allocated minus blocks freed since then */
	long fail_at; /* the allocation to fail, 0-based; -1 none */
	int counting; /* 1 between qwa_start and qwa_stop */
} qwa = {0, 0, -1, 0};

static inline void qwa_start(long fail_at)
{
	qwa.allocs = 0;
	qwa.live = 0;
	qwa.fail_at = fail_at;
	qwa.counting = 1;
}

static inline void qwa_stop(void)
{
	qwa.counting = 0;
}

/* 1 when the requested failure happened in the last run. */
static inline int qwa_injected(void)
{
	return qwa.fail_at < 0;
}

#if QWA_ACTIVE
void *__libc_malloc(size_t);
void *__libc_calloc(size_t, size_t);
void *__libc_realloc(void *, size_t);
void __libc_free(void *);

/* One gate for every allocation: counts it, or fails it on request. */
static int qwa_gate(void)
{
	if (!qwa.counting)
		return 1;
	if (qwa.fail_at >= 0 && qwa.allocs == qwa.fail_at) {
		qwa.fail_at = -1;
		return 0;
	}
	qwa.allocs++;
	return 1;
}

void *malloc(size_t n);
void *malloc(size_t n)
{
	void *p = qwa_gate() ? __libc_malloc(n) : NULL;

	if (p != NULL && qwa.counting)
		qwa.live++;
	return p;
}

void *calloc(size_t a, size_t b);
void *calloc(size_t a, size_t b)
{
	void *p = qwa_gate() ? __libc_calloc(a, b) : NULL;

	if (p != NULL && qwa.counting)
		qwa.live++;
	return p;
}

void *realloc(void *p, size_t n);
void *realloc(void *p, size_t n)
{
	if (p == NULL)
		return malloc(n);
	return qwa_gate() ? __libc_realloc(p, n) : NULL;
}

void free(void *p);
void free(void *p)
{
	if (p != NULL && qwa.counting)
		qwa.live--;
	__libc_free(p);
}
#endif

#endif
