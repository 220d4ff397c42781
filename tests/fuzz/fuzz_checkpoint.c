/* fuzz_checkpoint.c: libFuzzer harness for the checkpoint loader
 * (src/io/checkpoint.c) and the core's state check behind it
 * (qw_detector_state_set).
 *
 * The first byte picks how the rest is used, so the fuzzer gets past the
 * CRC and reaches every check:
 *   0  the bytes are a checkpoint file, as read from disk;
 *   1  the same, with the last 4 bytes replaced by the right CRC (the
 *      header's length, version and identity checks);
 *   2  the bytes are a payload, wrapped in a valid header for the
 *      harness's group (the core's validation of every state field).
 * Invariants (abort on violation): decode returns 0 or one of the codes
 * checkpoint.h documents, and on success its view lies inside the input;
 * a payload the core accepts gives a detector that takes a reading
 * without a sanitizer report, and whose state survives get/set/get
 * unchanged.  Seeds: tests/fuzz/corpus/checkpoint/.  Run through
 * tools/fuzz, linked against its archive of the codecs and the core (a
 * list of sources here had fallen behind the core's files and no longer
 * linked).
 */
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "checkpoint.h"
#include "quadwatch.h"

#define FZ_P 3                      /* channels of the harness's group */
#define FZ_GROUP "fz"               /* its name */
#define FZ_FP 0x0123456789abcdefULL /* its fingerprint */
#define FZ_MAX_STATE 4096           /* bytes: p = 3 state is ~300 */

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static const struct qw_ckpt_id fz_id = {FZ_GROUP, FZ_FP, FZ_P};

static qw_detector *fz_detector(void)
{
	static qw_detector *d; /* one for the whole run: allocation is slow */
	static const double floor[FZ_P] = {0.0125, 0.25, 3.5};
	struct qw_params par;

	if (d == NULL) {
		qw_params_default(&par, FZ_P);
		par.floor = floor;
		par.rate = 10.0;
		d = qw_detector_alloc(&par);
		if (d == NULL)
			abort();
	}
	return d;
}

static int fz_code_ok(int rc)
{
	return rc == 0 || rc == QW_ETRUNC || rc == QW_EFORMAT ||
	       rc == QW_EVERSION || rc == QW_ECHECKSUM || rc == QW_EMISMATCH;
}

/* A payload the core accepted: use it, and round-trip it. */
static void fz_exercise(qw_detector *d)
{
	static unsigned char a[FZ_MAX_STATE], b[FZ_MAX_STATE];
	const double x[FZ_P] = {2.385, -1.25, 40.5};
	struct qw_result res;
	size_t n = qw_detector_state_len(d);
	int rc;

	if (n > FZ_MAX_STATE)
		abort();
	qw_detector_state_get(d, a);
	if (qw_detector_state_set(d, a, n) != 0)
		abort(); /* what it produced, it must take back */
	qw_detector_state_get(d, b);
	if (memcmp(a, b, n) != 0)
		abort();
	rc = qw_detector_add(d, 1e9, x, &res);
	if (rc == 0 && res.scored && isnan(res.q))
		abort();
	(void)qw_detector_limit(d);
}

static void fz_load(const uint8_t *buf, size_t len)
{
	struct qw_ckpt_view v;
	qw_detector *d = fz_detector();
	int rc = qw_ckpt_decode(buf, len, &fz_id, &v);

	if (!fz_code_ok(rc))
		abort();
	if (rc != 0)
		return;
	if (v.state < buf || v.state + v.state_len > buf + len ||
	    v.group_len != strlen(FZ_GROUP))
		abort();
	if (v.state_len != qw_detector_state_len(d))
		return;
	if (qw_detector_state_set(d, v.state, v.state_len) == 0)
		fz_exercise(d);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	static unsigned char buf[QW_CKPT_HEADER + 8 + FZ_MAX_STATE +
				 QW_CKPT_TRAILER];
	uint32_t crc;
	size_t len, i;

	if (size < 1)
		return 0;
	switch (data[0] % 3) {
	case 0:
		fz_load(data + 1, size - 1);
		break;
	case 1:
		len = size - 1;
		if (len > sizeof buf)
			return 0;
		memcpy(buf, data + 1, len);
		if (len >= QW_CKPT_TRAILER) {
			crc = qw_ckpt_crc32(0, buf, len - QW_CKPT_TRAILER);
			for (i = 0; i < 4; i++)
				buf[len - QW_CKPT_TRAILER + i] =
					(unsigned char)(crc >> (8 * i));
		}
		fz_load(buf, len);
		break;
	default:
		if (size - 1 > FZ_MAX_STATE)
			return 0;
		if (qw_ckpt_encode(buf, sizeof buf, &fz_id, 0, data + 1,
				   size - 1, &len) != 0)
			abort();
		fz_load(buf, len);
		break;
	}
	return 0;
}
