/* alarm.c: persistence and hysteresis.  Raise when at least k of the last
 * m scored readings were over the limit; once raised, clear after clear_n
 * consecutive readings under it, and start the window afresh so a cleared
 * alarm cannot re-raise on the evidence that raised it.  The window is one
 * 64-bit word of bits: O(1) per reading, no memory. */
#include "quadwatch.h"

int qw_alarm_init(struct qw_alarm *a, unsigned k, unsigned m,
		  unsigned clear_n)
{
	if (k < 1 || k > m || m > QW_ALARM_MAX_M || clear_n < 1)
		return QW_ERROR(QW_EINVAL);
	a->k = k;
	a->m = m;
	a->clear_n = clear_n;
	qw_alarm_reset(a);
	return 0;
}

void qw_alarm_reset(struct qw_alarm *a)
{
	a->window = 0;
	a->count = 0;
	a->under = 0;
	a->in_alarm = 0;
}

int qw_alarm_add(struct qw_alarm *a, int over)
{
	/* The bit leaving the window is bit m-1; the count follows it (no
	 * popcount: portable builds have no instruction for it). */
	unsigned leaving = (unsigned)(a->window >> (a->m - 1)) & 1u;
	uint64_t mask = a->m == 64 ? ~(uint64_t)0
				   : (((uint64_t)1 << a->m) - 1);

	a->window = ((a->window << 1) | (over ? 1u : 0u)) & mask;
	a->count = a->count - leaving + (over ? 1u : 0u);
	if (!a->in_alarm) {
		if (a->count < a->k)
			return QW_EVENT_NONE;
		a->in_alarm = 1;
		a->under = 0;
		return QW_EVENT_RAISE;
	}
	a->under = over ? 0 : a->under + 1;
	if (a->under < a->clear_n)
		return QW_EVENT_NONE;
	qw_alarm_reset(a);
	return QW_EVENT_CLEAR;
}
