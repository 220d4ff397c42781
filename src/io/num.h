/* num.h: the one number parser, shared by the config reader, the text wire
 * codec and the command line.  strtod/strtoull with an end pointer and a
 * range check; never atof/atoi. */
#ifndef QW_NUM_H
#define QW_NUM_H

#include <stddef.h>
#include <stdint.h>

/* Parses the whole of s[0..len) (len = (size_t)-1: up to the NUL) as a
 * double; surrounding blanks are allowed, anything else is QW_ENUMBER.
 * "nan" (any case) gives NaN only when allow_nan; "inf" is refused unless
 * allow_inf.  Returns 0 or QW_ENUMBER. */
int qw_num_double(const char *s, size_t len, int allow_nan, int allow_inf,
		  double *out);
/* The exact fast path of qw_num_double alone (Clinger's): 1 and *out (the
 * double strtod gives) when s[0..len) is a plain decimal [+-]digits[.digits]
 * [e[+-]digits] with at most 19 significant digits, significand <= 2^53
 * and decimal exponent within +-22, blanks around allowed; else 0, *out
 * untouched.  Exposed for the tests. */
int qw_num_double_fast(const char *s, size_t len, double *out);
/* Unsigned integer in [lo, hi], decimal only.  0 or QW_ENUMBER. */
int qw_num_u64(const char *s, size_t len, uint64_t lo, uint64_t hi,
	       uint64_t *out);
/* A duration: a number with an optional unit s, min, h or d (no unit:
 * seconds).  *out in seconds.  Sets *had_unit when a unit was given. */
int qw_num_duration(const char *s, int *had_unit, double *out);

#endif
