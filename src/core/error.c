/* error.c: the single path every error takes (see QW_ERROR in quadwatch.h).
 * Kept out of line so one breakpoint on qw_error catches every failure at
 * its origin, as GSL_ERROR does with gsl_error. */
#include "quadwatch.h"

int qw_error(int code, const char *file, int line)
{
	(void)file;
	(void)line;
	return code;
}

const char *qw_strerror(int code)
{
	switch (code) {
	case QW_OK: return "success";
	case QW_ENOMEM: return "out of memory";
	case QW_EINVAL: return "invalid argument";
	case QW_ERANGE: return "value out of range";
	case QW_ENUMERIC: return "numeric fault in the factor";
	case QW_ETIME: return "time went backwards";
	case QW_ENODATA: return "every channel missing";
	case QW_EFORMAT: return "malformed input";
	case QW_ETRUNC: return "truncated input";
	case QW_EOVERSIZE: return "input too large";
	case QW_ECOUNT: return "wrong number of values";
	case QW_ENUMBER: return "not a number";
	case QW_EIO: return "input/output error";
	case QW_EVERSION: return "unsupported format version";
	case QW_ECHECKSUM: return "checksum mismatch";
	case QW_EMISMATCH: return "state belongs to another configuration";
	case QW_ESTATE: return "not valid in this state";
	}
	return "unknown error";
}
