/* fuzz_model.c: libFuzzer harness for the model-file decoder of `quadwatch
 * fit` (src/io/model.c, over the checkpoint codec).
 *
 * The first byte picks how the rest is used, so the fuzzer gets past the
 * CRC and reaches the metadata checks:
 *   0  the bytes are a model file, as read from disk;
 *   1  the same, with the last 4 bytes replaced by the right CRC;
 *   2  the bytes are a payload (metadata, then state), wrapped in a valid
 *      checkpoint header.
 * Invariants (abort on violation): decode returns 0 or one of the codes
 * model.h documents; on success the state lies inside the input, its
 * length is the payload's less the metadata, and the metadata passes the
 * documented range checks (limit factor finite and > 0, alpha in (0, 1),
 * used and trimmed at most readings; version 2's adaptive factor finite
 * and > 0, version 1's NaN).  Seeds: tests/fuzz/corpus/model/ (-0 files
 * are version 1, -1 files version 2).
 * Linked against tools/fuzz's archive of the codecs and the core.
 */
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "model.h"

#define FZ_MAX 8192 /* bytes of the largest input taken */

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static int fz_code_ok(int rc)
{
	return rc == 0 || rc == QW_ETRUNC || rc == QW_EFORMAT ||
	       rc == QW_EVERSION || rc == QW_ECHECKSUM || rc == QW_EMISMATCH;
}

static void fz_decode(const uint8_t *buf, size_t len)
{
	struct qw_model_view v;
	int rc = qw_model_decode(buf, len, &v);

	if (!fz_code_ok(rc))
		abort();
	if (rc != 0)
		return;
	if (v.meta.version != 1 && v.meta.version != QW_MODEL_VERSION)
		abort();
	if (v.state < buf || v.state + v.state_len > buf + len ||
	    v.state_len + (v.meta.version == 1 ? QW_MODEL_META_LEN_V1
					       : QW_MODEL_META_LEN) !=
	    v.ck.state_len)
		abort();
	if (!(v.meta.limit_factor > 0) || !isfinite(v.meta.limit_factor) ||
	    !(v.meta.alpha > 0 && v.meta.alpha < 1) ||
	    v.meta.used > v.meta.readings || v.meta.trimmed > v.meta.readings)
		abort();
	/* version 2 carries the adaptive chart's factor, version 1 none */
	if (v.meta.version == 1 ? !isnan(v.meta.adapt_factor)
				: !(v.meta.adapt_factor > 0) ||
				  !isfinite(v.meta.adapt_factor))
		abort();
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	static unsigned char buf[QW_CKPT_HEADER + 8 + FZ_MAX +
				 QW_CKPT_TRAILER];
	static const struct qw_ckpt_id id = {"fz", 0x0123456789abcdefULL, 3};
	uint32_t crc;
	size_t len, i;

	if (size < 1 || size - 1 > FZ_MAX)
		return 0;
	switch (data[0] % 3) {
	case 0:
		fz_decode(data + 1, size - 1);
		break;
	case 1:
		len = size - 1;
		memcpy(buf, data + 1, len);
		if (len >= QW_CKPT_TRAILER) {
			crc = qw_ckpt_crc32(0, buf, len - QW_CKPT_TRAILER);
			for (i = 0; i < 4; i++)
				buf[len - QW_CKPT_TRAILER + i] =
					(unsigned char)(crc >> (8 * i));
		}
		fz_decode(buf, len);
		break;
	default:
		if (qw_ckpt_encode(buf, sizeof buf, &id, 0, data + 1, size - 1,
				   &len) != 0)
			abort();
		fz_decode(buf, len);
		break;
	}
	return 0;
}
