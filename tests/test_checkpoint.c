/* test_checkpoint.c: the checkpoint file (src/io/checkpoint.c).
 *
 * Oracles: the published CRC-32 check value; a detector restored from its
 * checkpoint scores and learns exactly like the one that wrote it (the
 * state bytes equal, then the scores of further readings within 1e-12);
 * a file truncated at every byte offset, every bit of the header flipped
 * in turn and random bits of the payload flipped are all refused, set
 * aside, and leave the detector untouched; every refusal code is provoked
 * by a file crafted for it (CRC recomputed, so the check behind the CRC is
 * the one that fires); writing into a missing directory, a directory path
 * that is a regular file, or past a file-size limit fails cleanly and
 * keeps the previous checkpoint.  Fixed seeds throughout. */
#include <errno.h>
#include <fcntl.h>
#include <setjmp.h>
#include <signal.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <unistd.h>

#include <cmocka.h>

#include "checkpoint.h"
#include "quadwatch.h"
#include "qwtest.h"

#define CK_P 4              /* channels: a small file, ~400 bytes */
#define CK_SEED 20240611UL  /* fixed seed for readings and bit picks */
#define CK_LEARN 700        /* readings before the checkpoint (past warm-up) */
#define CK_MORE 300         /* readings after it, compared score by score */
#define CK_RATE_HZ 10.0     /* readings per second */
#define CK_SCORE_RTOL 1e-12 /* restored vs original: the bound
			       (in fact identical: same bytes, same code) */
#define CK_BODY_FLIPS 2000  /* random payload bits flipped, one at a time */
#define CK_ERR 600          /* bytes of a message */
#define CK_FP 0x5eed5eed12345678ULL /* a fingerprint */

struct ck_fix {
	char dir[64];
	char path[QW_CKPT_PATH_MAX];
	struct qw_params par;
	double floor[CK_P];
	qw_detector *d;          /* trained, written to path */
	unsigned char *file;     /* its bytes */
	size_t len;
	unsigned char *state;    /* a fresh detector's state, for "untouched" */
	size_t slen;
	gsl_rng *rng;
	double A[CK_P * CK_P], mean[CK_P], z[CK_P];
	struct qw_ckpt_id id;
};

static void ck_feed(struct ck_fix *f, qw_detector *d, size_t from, size_t n)
{
	struct qw_result res;
	double x[CK_P];
	size_t i;

	for (i = from; i < from + n; i++) {
		qwt_draw(f->rng, CK_P, f->A, f->mean, f->z, x);
		assert_int_equal(qw_detector_add(d, (double)i / CK_RATE_HZ, x,
						 &res), 0);
	}
}

static void ck_read(const char *path, unsigned char **buf, size_t *len)
{
	FILE *fp = fopen(path, "rb");
	long n;

	assert_non_null(fp);
	assert_int_equal(fseek(fp, 0, SEEK_END), 0);
	n = ftell(fp);
	assert_true(n > 0);
	rewind(fp);
	*buf = malloc((size_t)n);
	assert_non_null(*buf);
	assert_int_equal(fread(*buf, 1, (size_t)n, fp), (size_t)n);
	fclose(fp);
	*len = (size_t)n;
}

static void ck_write(const char *path, const unsigned char *buf, size_t len)
{
	FILE *fp = fopen(path, "wb");

	assert_non_null(fp);
	assert_int_equal(fwrite(buf, 1, len, fp), len);
	assert_int_equal(fclose(fp), 0);
}

static qw_detector *ck_fresh(const struct ck_fix *f)
{
	qw_detector *d = qw_detector_alloc(&f->par);

	assert_non_null(d);
	return d;
}

static int ck_setup(void **state)
{
	struct ck_fix *f = calloc(1, sizeof *f);
	char err[CK_ERR];
	size_t i;
	qw_detector *d0;

	assert_non_null(f);
	snprintf(f->dir, sizeof f->dir, "/tmp/qwckpt.XXXXXX");
	assert_non_null(mkdtemp(f->dir));
	f->rng = gsl_rng_alloc(gsl_rng_mt19937);
	gsl_rng_set(f->rng, CK_SEED);
	qwt_mixing(f->rng, CK_P, f->A);
	for (i = 0; i < CK_P; i++) {
		f->mean[i] = 2.385 * (double)(i + 1);
		f->floor[i] = 0.0125;
	}
	qw_params_default(&f->par, CK_P);
	f->par.floor = f->floor;
	f->par.rate = CK_RATE_HZ;
	f->par.warmup = 200;
	f->d = ck_fresh(f);
	ck_feed(f, f->d, 0, CK_LEARN);
	f->id.group = "skid-2.b";
	f->id.fingerprint = CK_FP;
	f->id.p = CK_P;
	assert_int_equal(qw_ckpt_path(f->path, sizeof f->path, f->dir,
				      f->id.group), 0);
	assert_int_equal(qw_ckpt_save(f->dir, &f->id, f->d, err, sizeof err),
			 0);
	ck_read(f->path, &f->file, &f->len);
	d0 = ck_fresh(f);
	f->slen = qw_detector_state_len(d0);
	f->state = malloc(f->slen);
	assert_non_null(f->state);
	qw_detector_state_get(d0, f->state);
	qw_detector_free(d0);
	*state = f;
	return 0;
}

static int ck_teardown(void **state)
{
	struct ck_fix *f = *state;
	char cmd[128];

	snprintf(cmd, sizeof cmd, "rm -rf '%s'", f->dir);
	assert_int_equal(system(cmd), 0);
	qw_detector_free(f->d);
	gsl_rng_free(f->rng);
	free(f->file);
	free(f->state);
	free(f);
	return 0;
}

/* A detector's state equals the fresh one's: a refusal changed nothing. */
static void ck_untouched(const struct ck_fix *f, const qw_detector *d)
{
	unsigned char *now = malloc(f->slen);

	assert_non_null(now);
	assert_int_equal(qw_detector_state_len(d), f->slen);
	qw_detector_state_get(d, now);
	assert_memory_equal(now, f->state, f->slen);
	free(now);
}

/* Removes every file in the fixture's directory but the checkpoint. */
static void ck_clear_aside(const struct ck_fix *f)
{
	char cmd[256];

	snprintf(cmd, sizeof cmd, "rm -f '%s'/*.rejected-*", f->dir);
	assert_int_equal(system(cmd), 0);
}

/* Removes the file a refusal message says it kept ("... kept as PATH"). */
static void ck_unlink_aside(const char *err)
{
	const char *p = strstr(err, "kept as ");

	assert_non_null(p);
	assert_int_equal(unlink(p + strlen("kept as ")), 0);
}

/* Writes buf as the checkpoint, restores: must be refused with rc (or any
 * refusal when rc is 0), the file set aside, d untouched. */
static void ck_refused(const struct ck_fix *f, const unsigned char *buf,
		       size_t len, int rc)
{
	qw_detector *d = ck_fresh(f);
	char err[CK_ERR];
	struct stat st;
	int got;

	ck_write(f->path, buf, len);
	got = qw_ckpt_restore(f->dir, &f->id, d, NULL, err, sizeof err);
	if (rc != 0 && got != rc)
		fail_msg("len %zu: got %d (%s), want %d: %s", len, got,
			 qw_strerror(got), rc, err);
	assert_true(got < 0 && got != QW_ENODATA && got != QW_EIO);
	assert_non_null(strstr(err, "refused"));
	assert_non_null(strstr(err, QW_CKPT_REJECT_SUFFIX));
	assert_int_not_equal(stat(f->path, &st), 0); /* moved aside */
	ck_unlink_aside(err);
	ck_untouched(f, d);
	qw_detector_free(d);
}

/* ---- tests -------------------------------------------------------------- */

/* The CRC-32 check value of "123456789" (the catalogue of parametrised
 * CRC algorithms, CRC-32/ISO-HDLC: check = 0xCBF43926). */
static void test_crc32_check_value(void **state)
{
	(void)state;
	assert_int_equal(qw_ckpt_crc32(0, "123456789", 9), 0xCBF43926u);
	/* incremental = one pass */
	assert_int_equal(qw_ckpt_crc32(qw_ckpt_crc32(0, "1234", 4), "56789",
				       5), 0xCBF43926u);
	assert_int_equal(qw_ckpt_crc32(0, "", 0), 0u);
}

/* Restored = original: same state bytes, then the same scores. */
static void test_round_trip_scores(void **state)
{
	struct ck_fix *f = *state;
	qw_detector *r = ck_fresh(f);
	unsigned char *a = malloc(f->slen), *b = malloc(f->slen);
	struct qw_result ra, rb;
	char err[CK_ERR];
	double x[CK_P];
	int64_t saved = 0;
	size_t i;

	assert_non_null(a);
	assert_non_null(b);
	assert_int_equal(qw_ckpt_restore(f->dir, &f->id, r, &saved, err,
					 sizeof err), 0);
	assert_true(saved > 0);
	qw_detector_state_get(f->d, a);
	qw_detector_state_get(r, b);
	assert_memory_equal(a, b, f->slen);
	assert_int_equal(qw_detector_counters(r)->readings, CK_LEARN);
	for (i = CK_LEARN; i < CK_LEARN + CK_MORE; i++) {
		qwt_draw(f->rng, CK_P, f->A, f->mean, f->z, x);
		if (i % 50 == 7)
			x[1] += 25.0; /* a few readings over the limit */
		assert_int_equal(qw_detector_add(f->d, (double)i / CK_RATE_HZ,
						 x, &ra), 0);
		assert_int_equal(qw_detector_add(r, (double)i / CK_RATE_HZ, x,
						 &rb), 0);
		assert_true(qwt_reldiff(ra.q, rb.q, 0) <= CK_SCORE_RTOL);
		assert_true(qwt_reldiff(ra.limit, rb.limit, 0) <= CK_SCORE_RTOL);
		assert_int_equal(ra.event, rb.event);
	}
	assert_true(qw_detector_counters(r)->exceedances > 0);
	assert_memory_equal(qw_detector_counters(f->d), qw_detector_counters(r),
			    sizeof(struct qw_counters));
	free(a);
	free(b);
	qw_detector_free(r);
}

/* Every proper prefix of a good file: QW_ETRUNC, set aside, no change. */
static void test_truncated_every_offset(void **state)
{
	struct ck_fix *f = *state;
	struct qw_ckpt_view v;
	size_t k;

	for (k = 0; k < f->len; k++) {
		assert_int_equal(qw_ckpt_decode(f->file, k, &f->id, &v),
				 QW_ETRUNC);
		ck_refused(f, f->file, k, QW_ETRUNC);
	}
	print_message("# truncated at each of %zu offsets: all refused\n",
		      f->len);
	/* the whole file still loads */
	assert_int_equal(qw_ckpt_decode(f->file, f->len, &f->id, &v), 0);
	assert_int_equal(v.state_len, f->slen);
}

/* Every bit of the header and name, every bit of the CRC, and random
 * payload bits: each flip alone is refused. */
static void test_flipped_bits(void **state)
{
	struct ck_fix *f = *state;
	unsigned char *c = malloc(f->len);
	size_t head = QW_CKPT_HEADER + strlen(f->id.group), bit, k, n = 0;

	assert_non_null(c);
	for (bit = 0; bit < 8 * f->len; bit++) {
		int in_body = bit / 8 >= head &&
			      bit / 8 < f->len - QW_CKPT_TRAILER;

		if (in_body)
			continue;
		memcpy(c, f->file, f->len);
		c[bit / 8] ^= (unsigned char)(1u << (bit % 8));
		ck_refused(f, c, f->len, 0);
		n++;
	}
	for (k = 0; k < CK_BODY_FLIPS; k++) {
		bit = 8 * head + gsl_rng_uniform_int(
				   f->rng, 8 * (f->len - head - QW_CKPT_TRAILER));
		memcpy(c, f->file, f->len);
		c[bit / 8] ^= (unsigned char)(1u << (bit % 8));
		ck_refused(f, c, f->len, QW_ECHECKSUM);
		n++;
	}
	print_message("# %zu single-bit flips: all refused\n", n);
	free(c);
}

/* Puts a field back in and fixes the CRC, so the check after it fires. */
static void ck_recrc(unsigned char *c, size_t len)
{
	uint32_t crc = qw_ckpt_crc32(0, c, len - QW_CKPT_TRAILER);
	size_t i;

	for (i = 0; i < 4; i++)
		c[len - QW_CKPT_TRAILER + i] = (unsigned char)(crc >> (8 * i));
}

/* One crafted file per refusal code. */
static void test_each_refusal(void **state)
{
	struct ck_fix *f = *state;
	unsigned char *c = malloc(f->len + 8);
	struct qw_ckpt_id other = f->id;
	struct qw_ckpt_view v;
	uint32_t order;
	double nan = NAN;

	assert_non_null(c);
	memcpy(c, f->file, f->len);
	c[0] = 'X';
	ck_refused(f, c, f->len, QW_EFORMAT);           /* magic */
	memcpy(c, f->file, f->len);
	c[8] = (unsigned char)(QW_CKPT_VERSION + 1);
	ck_recrc(c, f->len);
	ck_refused(f, c, f->len, QW_EVERSION);          /* a later version */
	memcpy(c, f->file, f->len);
	c[8] = (unsigned char)(QW_CKPT_VERSION - 1);
	ck_recrc(c, f->len);
	ck_refused(f, c, f->len, QW_EVERSION);          /* the one before */
	memcpy(c, f->file, f->len);
	memcpy(&order, c + 12, 4);
	order = ((order & 0xffu) << 24) | ((order >> 24) & 0xffu) |
		((order & 0xff00u) << 8) | ((order >> 8) & 0xff00u);
	memcpy(c + 12, &order, 4);
	ck_recrc(c, f->len);
	ck_refused(f, c, f->len, QW_EMISMATCH);         /* other byte order */
	memcpy(c, f->file, f->len);
	c[28] = 0;
	ck_refused(f, c, f->len, QW_EFORMAT);           /* name_len 0 */
	memcpy(c, f->file, f->len);
	c[f->len] = 0;
	ck_refused(f, c, f->len + 1, QW_EFORMAT);       /* trailing byte */
	memcpy(c, f->file, f->len);
	/* a NaN as the factor's last entry, CRC fixed: the core refuses */
	memcpy(c + f->len - QW_CKPT_TRAILER - sizeof nan, &nan, sizeof nan);
	ck_recrc(c, f->len);
	assert_int_equal(qw_ckpt_decode(c, f->len, &f->id, &v), 0);
	ck_refused(f, c, f->len, QW_EFORMAT);
	/* the good file read for another group, p or fingerprint */
	other.fingerprint ^= 1;
	assert_int_equal(qw_ckpt_decode(f->file, f->len, &other, &v),
			 QW_EMISMATCH);
	other = f->id;
	other.p = CK_P + 1;
	assert_int_equal(qw_ckpt_decode(f->file, f->len, &other, &v),
			 QW_EMISMATCH);
	other = f->id;
	other.group = "skid-2.c";
	assert_int_equal(qw_ckpt_decode(f->file, f->len, &other, &v),
			 QW_EMISMATCH);
	ck_write(f->path, f->file, f->len);
	ck_clear_aside(f);
	free(c);
}

/* A config change (other channels: other fingerprint) is refused through
 * the file path too, and a second refusal in the same second gets its
 * own aside name. */
static void test_mismatch_set_aside(void **state)
{
	struct ck_fix *f = *state;
	struct qw_ckpt_id other = f->id;
	qw_detector *d = ck_fresh(f);
	char err[CK_ERR], err2[CK_ERR];

	other.fingerprint = CK_FP + 1;
	ck_write(f->path, f->file, f->len);
	assert_int_equal(qw_ckpt_restore(f->dir, &other, d, NULL, err,
					 sizeof err), QW_EMISMATCH);
	assert_non_null(strstr(err, "another configuration"));
	ck_write(f->path, f->file, f->len);
	assert_int_equal(qw_ckpt_restore(f->dir, &other, d, NULL, err2,
					 sizeof err2), QW_EMISMATCH);
	assert_non_null(strstr(err, "kept as"));
	assert_non_null(strstr(err2, "kept as"));
	assert_string_not_equal(strstr(err, "kept as"), strstr(err2, "kept as"));
	ck_untouched(f, d);
	/* no file at all: QW_ENODATA, nothing else happens */
	assert_int_equal(qw_ckpt_restore(f->dir, &other, d, NULL, err,
					 sizeof err), QW_ENODATA);
	ck_clear_aside(f);
	ck_write(f->path, f->file, f->len);
	qw_detector_free(d);
}

/* Bad names, small buffers, unreadable files. */
static void test_bad_arguments(void **state)
{
	struct ck_fix *f = *state;
	struct qw_ckpt_id bad = f->id;
	unsigned char small[16];
	char path[32], err[CK_ERR], sub[QW_CKPT_PATH_MAX];
	qw_detector *d = ck_fresh(f);
	size_t len;

	assert_int_equal(qw_ckpt_path(path, sizeof path, "/x", "a/b"),
			 QW_EINVAL);
	assert_int_equal(qw_ckpt_path(path, sizeof path, "/x", ""), QW_EINVAL);
	assert_int_equal(qw_ckpt_path(path, sizeof path, "", "a"), QW_EINVAL);
	assert_int_equal(qw_ckpt_path(path, sizeof path, "/a/long/directory",
				      "group-name"), QW_EOVERSIZE);
	assert_int_equal(qw_ckpt_encode(small, sizeof small, &f->id, 0,
					f->state, f->slen, &len), QW_EOVERSIZE);
	bad.group = "../etc";
	assert_int_equal(qw_ckpt_save(f->dir, &bad, f->d, err, sizeof err),
			 QW_EINVAL);
	assert_int_equal(qw_ckpt_restore(f->dir, &bad, d, NULL, err,
					 sizeof err), QW_EINVAL);
	/* the checkpoint path is a directory: cannot read, left in place */
	bad.group = "adir";
	snprintf(sub, sizeof sub, "%s/adir%s", f->dir, QW_CKPT_SUFFIX);
	assert_int_equal(mkdir(sub, 0700), 0);
	assert_int_equal(qw_ckpt_restore(f->dir, &bad, d, NULL, err,
					 sizeof err), QW_EIO);
	assert_non_null(strstr(err, "cannot read"));
	assert_int_equal(qw_ckpt_save(f->dir, &bad, f->d, err, sizeof err),
			 QW_EIO); /* rename over a directory */
	assert_int_equal(rmdir(sub), 0);
	ck_untouched(f, d);
	qw_detector_free(d);
}

/* Unwritable places: no directory; a "directory" that is a regular file;
 * a file-size limit (a full disk's EFBIG/ENOSPC path).  Each fails with
 * QW_EIO and a message; the previous checkpoint survives and no
 * temporary is left. */
static void test_write_failures(void **state)
{
	struct ck_fix *f = *state;
	char err[CK_ERR], dir[128], tmp[QW_CKPT_PATH_MAX + 8];
	struct rlimit old, lim;
	struct stat st;
	qw_detector *d;

	snprintf(dir, sizeof dir, "%s/missing", f->dir);
	assert_int_equal(qw_ckpt_save(dir, &f->id, f->d, err, sizeof err),
			 QW_EIO);
	assert_non_null(strstr(err, "open"));
	snprintf(dir, sizeof dir, "%s/plainfile", f->dir);
	ck_write(dir, (const unsigned char *)"x", 1);
	assert_int_equal(qw_ckpt_save(dir, &f->id, f->d, err, sizeof err),
			 QW_EIO);
	assert_non_null(strstr(err, "Not a directory"));
	/* file-size limit below the file: write fails with EFBIG */
	assert_int_equal(getrlimit(RLIMIT_FSIZE, &old), 0);
	signal(SIGXFSZ, SIG_IGN);
	lim = old;
	lim.rlim_cur = 64; /* bytes: less than any checkpoint */
	assert_int_equal(setrlimit(RLIMIT_FSIZE, &lim), 0);
	assert_int_equal(qw_ckpt_save(f->dir, &f->id, f->d, err, sizeof err),
			 QW_EIO);
	assert_int_equal(setrlimit(RLIMIT_FSIZE, &old), 0);
	signal(SIGXFSZ, SIG_DFL);
	assert_non_null(strstr(err, "write"));
	snprintf(tmp, sizeof tmp, "%s%s", f->path, QW_CKPT_TMP_SUFFIX);
	assert_int_not_equal(stat(tmp, &st), 0);
	d = ck_fresh(f);
	assert_int_equal(qw_ckpt_restore(f->dir, &f->id, d, NULL, err,
					 sizeof err), 0);
	qw_detector_free(d);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(test_crc32_check_value),
		cmocka_unit_test(test_round_trip_scores),
		cmocka_unit_test(test_truncated_every_offset),
		cmocka_unit_test(test_flipped_bits),
		cmocka_unit_test(test_each_refusal),
		cmocka_unit_test(test_mismatch_set_aside),
		cmocka_unit_test(test_bad_arguments),
		cmocka_unit_test(test_write_failures),
	};

	return cmocka_run_group_tests(tests, ck_setup, ck_teardown);
}
