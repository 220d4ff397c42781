/* fmt.h: fast number formatting that gives printf's text byte for byte,
 * for the replay --scores file (one row per reading, 10^6 and more). */
#ifndef QW_FMT_H
#define QW_FMT_H

#include <stddef.h>
#include <stdint.h>

#define QW_FMT_MAX 330 /* bytes any qw_fmt_* output needs, NUL included:
			  %.6f of DBL_MAX is 316 characters */
#define QW_FMT_G_PREC_MAX 12 /* largest precision qw_fmt_g takes (fmt.c) */

/* Writes v as printf's "%.{prec}g" (1 <= prec <= QW_FMT_G_PREC_MAX) into
 * buf (QW_FMT_MAX bytes) and returns the length (NUL not counted). */
size_t qw_fmt_g(char *buf, double v, int prec);
/* Writes v as printf's "%.6f" into buf (QW_FMT_MAX bytes); the length. */
size_t qw_fmt_f6(char *buf, double v);

/* The whole part's digits of the last qw_fmt_f6_memo call, for a stream
 * of times whose seconds repeat from row to row (zeroed: empty). */
#define QW_FMT_WHOLE_MAX 16 /* digits of a whole part qw_fmt_f6 lays out */
struct qw_fmt_whole {
	uint64_t whole;
	size_t len;                  /* digits in txt; 0: none yet */
	char txt[QW_FMT_WHOLE_MAX];
};
/* qw_fmt_f6, the whole part's digits taken from memo when it is the same as
 * last time, else formatted and kept in memo: the same bytes. */
size_t qw_fmt_f6_memo(char *buf, double v, struct qw_fmt_whole *memo);

#endif
