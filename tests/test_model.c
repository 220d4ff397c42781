/* test_model.c: the model file of `quadwatch fit` (src/io/model.c) and
 * the detector a group builds from it.
 *
 * Oracles: a file written from a fitted model decodes to the same
 * metadata and state bytes, and a group loading it with model_use =
 * fixed scores exactly like the fitted detector (frozen, same limit times
 * the fitted factor); warm is the same model, learning, its limit times
 * the adaptive chart's factor; a version 1 file (no adaptive factor),
 * built from the documented layout, still loads fixed and is refused
 * warm; every refusal is provoked by a file crafted for it (truncated, a
 * flipped bit, a checkpoint that is not a model, another metadata
 * version, an impossible value, other channels, another dynamics or
 * mode) and its message names the file. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <cmocka.h>
#include <gsl/gsl_errno.h>

#include "bytes.h"
#include "config.h"
#include "model.h"
#include "quadwatch.h"
#include "qwalloc.h"
#include "qwtest.h"

#define MD_P 3
#define MD_N 3000          /* readings fitted */
#define MD_ERR 1024        /* bytes of a message */
#define MD_FACTOR 1.2385   /* a limit factor to carry */
#define MD_ADAPT 0.8765    /* an adaptive chart's factor to carry */

struct md_fix {
	char dir[64], path[128], ini[1024];
	struct qw_config cfg;
	qw_detector *fitted;    /* frozen, as fit leaves it */
	struct qw_model_meta meta;
	unsigned char *file;
	size_t len;
	gsl_rng *rng;
	double A[MD_P * MD_P], z[MD_P];
};

static void md_config(struct md_fix *f, const char *channels,
		      const char *use)
{
	char text[2048], err[MD_ERR];

	qw_config_free(&f->cfg);
	snprintf(text, sizeof text, "[group rig]\nchannels = %s\nrate = 1\n"
		 "alarms_per_day = 50\nfloor = 1e-6\nmodel = %s\n%s%s\n",
		 channels, f->path, use ? "model_use = " : "",
		 use ? use : "");
	assert_int_equal(qw_config_load_string(text, "t.ini", &f->cfg, err,
					       sizeof err), 0);
}

static int md_setup(void **st)
{
	struct md_fix *f = calloc(1, sizeof *f);
	double *t = malloc(MD_N * sizeof *t);
	double *x = malloc(MD_N * MD_P * sizeof *x);
	struct qw_fit_opts o;
	struct qw_fit_result r;
	struct qw_ckpt_id id;
	char err[MD_ERR];
	size_t i;
	FILE *fp;

	assert_non_null(f);
	strcpy(f->dir, "/tmp/qw-model-XXXXXX");
	assert_non_null(mkdtemp(f->dir));
	snprintf(f->path, sizeof f->path, "%s/rig.qwmodel", f->dir);
	f->rng = gsl_rng_alloc(gsl_rng_mt19937);
	gsl_rng_set(f->rng, 31);
	qwt_mixing(f->rng, MD_P, f->A);
	md_config(f, "a, b, c", NULL);
	for (i = 0; i < MD_N; i++) {
		t[i] = (double)i;
		qwt_draw(f->rng, MD_P, f->A, NULL, f->z, x + i * MD_P);
	}
	qw_fit_opts_default(&o);
	assert_int_equal(qw_fit_run(&f->cfg.groups[0].params, t, x, MD_N, &o,
				    &r, &f->fitted), 0);
	memset(&f->meta, 0, sizeof f->meta);
	f->meta.readings = r.readings;
	f->meta.used = r.used;
	f->meta.trimmed = r.trimmed;
	f->meta.heldout = r.heldout;
	f->meta.limit_factor = MD_FACTOR;
	f->meta.limit_gauss = r.limit_gauss;
	f->meta.limit_emp = r.limit_gauss * MD_FACTOR;
	f->meta.alpha = r.alpha;
	f->meta.consistency = r.consistency;
	f->meta.smoothing = f->cfg.groups[0].params.smoothing;
	f->meta.gpd_xi = NAN;
	f->meta.gpd_sigma = NAN;
	f->meta.adapt_factor = MD_ADAPT;
	f->meta.adapt_scored = r.adapt_scored;
	f->meta.adapt_gpd_xi = 0.125;
	f->meta.adapt_gpd_sigma = NAN;
	id.group = "rig";
	id.fingerprint = qw_config_fingerprint(&f->cfg.groups[0]);
	id.p = MD_P;
	assert_int_equal(qw_model_save(f->path, &id, &f->meta, f->fitted, err,
				       sizeof err), 0);
	fp = fopen(f->path, "rb");
	assert_non_null(fp);
	f->file = malloc(1 << 16);
	f->len = fread(f->file, 1, 1 << 16, fp);
	fclose(fp);
	free(t);
	free(x);
	*st = f;
	return 0;
}

static int md_teardown(void **st)
{
	struct md_fix *f = *st;

	unlink(f->path);
	rmdir(f->dir);
	qw_detector_free(f->fitted);
	qw_config_free(&f->cfg);
	gsl_rng_free(f->rng);
	free(f->file);
	free(f);
	return 0;
}

static void md_write(const struct md_fix *f, const void *buf, size_t len)
{
	FILE *fp = fopen(f->path, "wb");

	assert_non_null(fp);
	assert_int_equal(fwrite(buf, 1, len, fp), len);
	fclose(fp);
}

static void roundtrip(void **st)
{
	struct md_fix *f = *st;
	struct qw_model_view v;
	size_t slen = qw_detector_state_len(f->fitted);
	unsigned char *s = malloc(slen);

	assert_int_equal(qw_model_decode(f->file, f->len, &v), 0);
	assert_int_equal(f->len, qw_model_encoded_len(3, slen));
	assert_int_equal(v.ck.p, MD_P);
	assert_memory_equal(v.ck.group, "rig", 3);
	assert_true(v.meta.limit_factor == MD_FACTOR);
	assert_true(v.meta.used == f->meta.used);
	assert_true(v.meta.trimmed == f->meta.trimmed);
	assert_true(v.meta.alpha == f->meta.alpha);
	assert_true(isnan(v.meta.gpd_xi));
	assert_int_equal(v.meta.version, QW_MODEL_VERSION);
	assert_true(v.meta.adapt_factor == MD_ADAPT);
	assert_true(v.meta.adapt_scored == f->meta.adapt_scored);
	assert_true(v.meta.adapt_gpd_xi == 0.125);
	assert_true(isnan(v.meta.adapt_gpd_sigma));
	assert_int_equal(v.state_len, slen);
	qw_detector_state_get(f->fitted, s);
	assert_memory_equal(v.state, s, slen);
	free(s);
}

/* The fitted model as an adaptive group with no factor: the group's
 * params, the state copied in, learning. */
static qw_detector *md_adaptive(struct md_fix *f)
{
	size_t len = qw_detector_state_len(f->fitted);
	void *buf = malloc(len);
	qw_detector *d = qw_detector_alloc(&f->cfg.groups[0].params);

	assert_non_null(buf);
	assert_non_null(d);
	qw_detector_state_get(f->fitted, buf);
	assert_int_equal(qw_detector_state_set(d, buf, len), 0);
	qw_detector_freeze(d, 0);
	qw_detector_counters_reset(d);
	free(buf);
	return d;
}

/* fixed: the same scores, nothing learned, the limit times the factor;
 * warm: the same model, learning, the limit times the adaptive factor. */
static void loaded_groups(void **st)
{
	struct md_fix *f = *st;
	struct qw_model_meta meta;
	struct qw_result ra, rb;
	char err[MD_ERR];
	qw_detector *d = NULL, *ref;
	double x[MD_P];
	uint64_t learned;
	int i;

	md_write(f, f->file, f->len);
	md_config(f, "a, b, c", "fixed");
	assert_int_equal(qw_model_detector(&f->cfg.groups[0], &d, &meta, err,
					   sizeof err), 0);
	assert_true(qw_detector_frozen(d));
	/* the group counts its own readings; the model is the fit's */
	assert_true(qw_detector_counters(d)->readings == 0);
	assert_true(qw_detector_count(d) > 0);
	/* a stream of its own: a time before the fit's last one is scored */
	qwt_draw(f->rng, MD_P, f->A, NULL, f->z, x);
	assert_int_equal(qw_detector_add(d, -5.0, x, &ra), 0);
	assert_true(ra.scored);
	/* a fixed model's steady limit is the one in force */
	assert_true(qw_detector_steady_limit(d) == qw_detector_limit(d));
	assert_true(meta.limit_factor == MD_FACTOR);
	assert_true(qwt_reldiff(qw_detector_limit(d),
				MD_FACTOR * qw_detector_limit(f->fitted),
				0) < 1e-12);
	learned = qw_detector_counters(d)->learned;
	for (i = 0; i < 50; i++) {
		qwt_draw(f->rng, MD_P, f->A, NULL, f->z, x);
		qw_detector_add(d, 1e4 + i, x, &ra);
		qw_detector_add_flags(f->fitted, 1e4 + i, x, QW_ADD_NOLEARN,
				      &rb);
		assert_true(ra.q == rb.q);
	}
	assert_true(qw_detector_counters(d)->learned == learned);
	qw_detector_free(d);
	md_config(f, "a, b, c", "warm");
	assert_int_equal(qw_model_detector(&f->cfg.groups[0], &d, NULL, err,
					   sizeof err), 0);
	assert_false(qw_detector_frozen(d));
	qwt_draw(f->rng, MD_P, f->A, NULL, f->z, x);
	qw_detector_add(d, 2e4, x, &ra);
	qw_detector_add_flags(f->fitted, 2e4, x, QW_ADD_NOLEARN, &rb);
	assert_true(ra.q == rb.q); /* it starts from the fitted model */
	assert_true(qw_detector_counters(d)->learned == learned + 1);
	/* its limit is the adaptive chart's own times the adaptive factor */
	ref = md_adaptive(f);
	qw_detector_add(ref, 2e4, x, &rb);
	assert_true(qwt_reldiff(qw_detector_limit(d),
				MD_ADAPT * qw_detector_limit(ref), 0) < 1e-12);
	qw_detector_free(ref);
	qw_detector_free(d);
	/* no model key: a fresh detector */
	f->cfg.groups[0].model[0] = '\0';
	assert_int_equal(qw_model_detector(&f->cfg.groups[0], &d, NULL, err,
					   sizeof err), 0);
	assert_true(qw_detector_count(d) == 0);
	qw_detector_free(d);
}

/* Loads the current file into group rig; expects code and a message
 * naming the file and containing what. */
static void md_refused(struct md_fix *f, int code, const char *what)
{
	char err[MD_ERR] = "";
	qw_detector *d = (qw_detector *)f; /* must come back NULL */

	assert_int_equal(qw_model_detector(&f->cfg.groups[0], &d, NULL, err,
					   sizeof err), code);
	assert_null(d);
	printf("# refused: %s\n", err);
	assert_non_null(strstr(err, f->path));
	assert_non_null(strstr(err, what));
}

/* Rewrites the CRC after an edit, so the check behind it fires. */
static void md_recrc(unsigned char *b, size_t len)
{
	qw_le_put32(b + len - QW_CKPT_TRAILER,
		    qw_ckpt_crc32(0, b, len - QW_CKPT_TRAILER));
}

static void refusals(void **st)
{
	struct md_fix *f = *st;
	unsigned char *b = malloc(f->len);
	size_t meta = QW_CKPT_HEADER + 3; /* payload offset */
	struct qw_ckpt_id id = {"rig", 0, MD_P};
	size_t len;

	md_config(f, "a, b, c", NULL);
	unlink(f->path);
	md_refused(f, QW_ENODATA, "no such file");
	md_write(f, f->file, f->len - 7);
	md_refused(f, QW_ETRUNC, "truncated");
	memcpy(b, f->file, f->len);
	b[meta + 200] ^= 0x10;
	md_write(f, b, f->len);
	md_refused(f, QW_ECHECKSUM, "checksum");
	/* a checkpoint (a detector state without the model metadata) */
	id.fingerprint = qw_config_fingerprint(&f->cfg.groups[0]);
	assert_int_equal(qw_ckpt_encode(b, f->len, &id, 0,
					f->file + meta + QW_MODEL_META_LEN,
					f->len - meta - QW_MODEL_META_LEN -
					QW_CKPT_TRAILER, &len), 0);
	md_write(f, b, len);
	md_refused(f, QW_EFORMAT, "not a model file");
	memcpy(b, f->file, f->len);
	qw_le_put32(b + meta + 8, QW_MODEL_VERSION + 1);
	md_recrc(b, f->len);
	md_write(f, b, f->len);
	md_refused(f, QW_EVERSION, "version");
	memcpy(b, f->file, f->len);
	b[meta + 64 + 7] |= 0x80; /* limit factor negative */
	md_recrc(b, f->len);
	md_write(f, b, f->len);
	md_refused(f, QW_EFORMAT, "not a model file");
	memcpy(b, f->file, f->len);
	b[meta + 120 + 7] |= 0x80; /* adaptive factor negative */
	md_recrc(b, f->len);
	md_write(f, b, f->len);
	md_refused(f, QW_EFORMAT, "not a model file");
	/* the good file, other groups */
	md_write(f, f->file, f->len);
	md_config(f, "a, c, b", NULL);
	md_refused(f, QW_EMISMATCH, "channels");
	md_config(f, "a, b", NULL);
	md_refused(f, QW_EMISMATCH, "channels");
	md_config(f, "a, b, c", NULL);
	f->cfg.groups[0].params.dynamics = QW_DYN_AR1;
	md_refused(f, QW_EMISMATCH, "dynamics = none");
	f->cfg.groups[0].params.dynamics = QW_DYN_NONE;
	f->cfg.groups[0].params.mode = QW_MODE_MEWMA;
	md_refused(f, QW_EMISMATCH, "mode = plain");
	free(b);
}

/* A version 1 file (the layout before the adaptive factor: metadata to
 * offset 120, then the state), made from this fit's metadata and state:
 * it decodes with no adaptive factor, loads fixed with its limit factor,
 * and a warm group refuses it, saying what to do. */
static void version1_file(void **st)
{
	struct md_fix *f = *st;
	size_t meta = QW_CKPT_HEADER + 3, len;
	size_t slen = f->len - meta - QW_MODEL_META_LEN - QW_CKPT_TRAILER;
	unsigned char *pl = malloc(QW_MODEL_META_LEN_V1 + slen);
	unsigned char *b = malloc(f->len);
	struct qw_ckpt_id id = {"rig", 0, MD_P};
	struct qw_model_view v;
	struct qw_model_meta m;
	char err[MD_ERR];
	qw_detector *d = NULL;

	assert_non_null(pl);
	assert_non_null(b);
	memcpy(pl, f->file + meta, QW_MODEL_META_LEN_V1);
	qw_le_put32(pl + 8, 1);
	memcpy(pl + QW_MODEL_META_LEN_V1, f->file + meta + QW_MODEL_META_LEN,
	       slen);
	id.fingerprint = qw_config_fingerprint(&f->cfg.groups[0]);
	assert_int_equal(qw_ckpt_encode(b, f->len, &id, 0, pl,
					QW_MODEL_META_LEN_V1 + slen, &len), 0);
	assert_int_equal(qw_model_decode(b, len, &v), 0);
	assert_int_equal(v.meta.version, 1);
	assert_true(isnan(v.meta.adapt_factor));
	assert_true(v.meta.limit_factor == MD_FACTOR);
	assert_int_equal(v.state_len, slen);
	assert_memory_equal(v.state, f->file + meta + QW_MODEL_META_LEN, slen);
	md_write(f, b, len);
	md_config(f, "a, b, c", "fixed");
	assert_int_equal(qw_model_detector(&f->cfg.groups[0], &d, &m, err,
					   sizeof err), 0);
	assert_true(qwt_reldiff(qw_detector_limit(d),
				MD_FACTOR * qw_detector_limit(f->fitted),
				0) < 1e-12);
	assert_true(qw_model_factor(&m, QW_MODEL_FIXED) == MD_FACTOR);
	qw_detector_free(d);
	md_config(f, "a, b, c", "warm");
	md_refused(f, QW_EVERSION, "model_use = fixed");
	md_config(f, "a, b, c", NULL);
	free(pl);
	free(b);
}

/* Every allocation of loading a model, failed in turn: a clean
 * QW_ENOMEM with a message, no detector, nothing leaked. */
static void load_allocation_failures(void **st)
{
	struct md_fix *f = *st;
	char err[MD_ERR];
	qw_detector *d;
	long k;
	int rc;

	if (!QWA_ACTIVE)
		skip();
	md_write(f, f->file, f->len);
	md_config(f, "a, b, c", "fixed");
	for (k = 0;; k++) {
		err[0] = '\0';
		qwa_start(k);
		rc = qw_model_detector(&f->cfg.groups[0], &d, NULL, err,
				       sizeof err);
		qw_detector_free(rc == 0 ? d : NULL);
		qwa_stop();
		if (!qwa_injected()) {
			assert_int_equal(rc, 0);
			break;
		}
		assert_int_equal(rc, QW_ENOMEM);
		assert_null(d);
		assert_true(err[0] != '\0');
		assert_int_equal(qwa.live, 0);
	}
	printf("# model load: %ld allocations, each failed in turn\n", k);
	assert_true(k >= 2);
}

static void config_keys(void **st)
{
	struct qw_config cfg;
	char err[MD_ERR];

	(void)st;
	memset(&cfg, 0, sizeof cfg);
	assert_int_equal(qw_config_load_string("[group g]\nchannels = a\n"
		"model_use = warm\n", "k.ini", &cfg, err, sizeof err),
		QW_EFORMAT);
	printf("# %s\n", err);
	assert_non_null(strstr(err, "k.ini:3"));
	assert_non_null(strstr(err, "model_use"));
	assert_int_equal(qw_config_load_string("[group g]\nchannels = a\n"
		"model = m\nmodel_use = cold\n", "k.ini", &cfg, err,
		sizeof err), QW_EFORMAT);
	assert_non_null(strstr(err, "k.ini:4"));
	assert_non_null(strstr(err, "fixed or warm"));
	assert_int_equal(qw_config_load_string("[group g]\nchannels = a\n"
		"model = m.qwmodel\n", "k.ini", &cfg, err, sizeof err), 0);
	assert_string_equal(cfg.groups[0].model, "m.qwmodel");
	assert_int_equal(cfg.groups[0].model_use, QW_MODEL_FIXED);
	qw_config_free(&cfg);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(roundtrip),
		cmocka_unit_test(loaded_groups),
		cmocka_unit_test(refusals),
		cmocka_unit_test(version1_file),
		cmocka_unit_test(load_allocation_failures),
		cmocka_unit_test(config_keys),
	};

	gsl_set_error_handler_off();
	return cmocka_run_group_tests(tests, md_setup, md_teardown);
}
