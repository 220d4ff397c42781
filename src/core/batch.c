/* batch.c: a frame of readings scored and learned through one call.
 *
 * qw_detector_add_batch is qw_detector_add applied to each reading in
 * turn, so its results are those of reading-by-reading scoring bit for bit
 * by construction: same model, same order, same code.  It stops after the
 * first reading that raises or clears an alarm: that reading's result, and
 * the attribution it points at (owned by the detector, overwritten by the
 * next reading over the limit), are then still valid for the caller to
 * publish; the caller continues with the rest of the frame.  An event is
 * rare, so a frame is normally one call.
 *
 * What a call saves is the caller's per-reading work around the detector
 * (dispatch, counters, logging decisions in a loop of its own); every
 * reading still pays qw_detector_add's own fixed cost: clearing its
 * result, screening the channels for NaN and Inf, the limit lookup, the
 * alarm window and the learning decision, besides the sweep. */
#include <stddef.h>

#include "quadwatch.h"

size_t qw_detector_add_batch(qw_detector *d, size_t n, const double *t,
			     const double *x, struct qw_result *res, int *rc)
{
	size_t p = qw_detector_params(d)->p, k;

	for (k = 0; k < n; k++) {
		int r = qw_detector_add(d, t[k], x + k * p, &res[k]);

		if (rc != NULL)
			rc[k] = r;
		if (res[k].event != QW_EVENT_NONE)
			return k + 1;
	}
	return n;
}
