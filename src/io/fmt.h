/* fmt.h: fast number formatting that gives printf's text byte for byte,
 * for the replay --scores file (one row per reading, 10^6 and more). */
#ifndef QW_FMT_H
#define QW_FMT_H

#include <stddef.h>

#define QW_FMT_MAX 330 /* bytes any qw_fmt_* output needs, NUL included:
			  %.6f of DBL_MAX is 316 characters */
#define QW_FMT_G_PREC_MAX 12 /* largest precision qw_fmt_g takes (fmt.c) */

/* Writes v as printf's "%.{prec}g" (1 <= prec <= QW_FMT_G_PREC_MAX) into
 * buf (QW_FMT_MAX bytes) and returns the length (NUL not counted). */
size_t qw_fmt_g(char *buf, double v, int prec);
/* Writes v as printf's "%.6f" into buf (QW_FMT_MAX bytes); the length. */
size_t qw_fmt_f6(char *buf, double v);

#endif
