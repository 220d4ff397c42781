/* model.c: the model file of `quadwatch fit` (model.h), and the detector
 * a group builds from it.
 *
 * The file is a checkpoint image (checkpoint.c: magic, version, header,
 * CRC-32 over everything) for the fitted group's name, p and channel
 * fingerprint, whose payload is (little endian):
 *     0  magic        8 bytes  "QWFITMD1"
 *     8  version      u32      QW_MODEL_VERSION
 *    12  dynamics     u32      enum qw_dynamics
 *    16  mode         u32      enum qw_mode
 *    20  reserved     u32      0
 *    24  smoothing    f64      mewma rho
 *    32  readings     u64      offered to the fit
 *    40  used         u64      learned by the model
 *    48  trimmed      u64      left out as far out
 *    56  heldout      u64      held-out readings behind the tail
 *    64  limit_factor f64      empirical / Gaussian limit
 *    72  limit_gauss  f64
 *    80  limit_emp    f64
 *    88  alpha        f64
 *    96  consistency  f64
 *   104  gpd_xi       f64      NaN when no tail was fitted
 *   112  gpd_sigma    f64
 *   120  adapt_factor f64      the adaptive chart's empirical / Gaussian
 *   128  adapt_scored u64      its scores behind that tail
 *   136  adapt_gpd_xi f64      NaN when no tail was fitted
 *   144  adapt_gpd_sigma f64
 *   152  state        the rest: qw_detector_state_get bytes (host order,
 *                     the checkpoint header records which)
 * Version 1 (quadwatch before the adaptive factor) stops at 120, where
 * its state starts; it still loads as a fixed model, and a warm group
 * refuses it (no factor measured for the adaptive chart).
 * A checkpoint's payload never starts with the model magic, so neither
 * kind of file passes for the other.  Workload: one file per group per
 * fit or start; allocation is fine. */
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "bytes.h"
#include "log.h"
#include "model.h"

static const char *const model_dyn_names[] = {"none", "ar1", "var1"};
static const char *const model_mode_names[] = {"plain", "mewma"};
#define MODEL_NDYN 3u
#define MODEL_NMODE 2u

static void model_putd(unsigned char *b, double v)
{
	uint64_t u;

	memcpy(&u, &v, sizeof u);
	qw_le_put64(b, u);
}

static double model_getd(const unsigned char *b)
{
	uint64_t u = qw_le_get64(b);
	double v;

	memcpy(&v, &u, sizeof v);
	return v;
}

size_t qw_model_payload_len(size_t state_len)
{
	return QW_MODEL_META_LEN + state_len;
}

size_t qw_model_encoded_len(size_t name_len, size_t state_len)
{
	return qw_ckpt_encoded_len(name_len, qw_model_payload_len(state_len));
}

/* The metadata into b[0..QW_MODEL_META_LEN). */
static void model_put_meta(unsigned char *b, const struct qw_model_meta *m)
{
	memcpy(b, QW_MODEL_MAGIC, QW_MODEL_MAGIC_LEN);
	qw_le_put32(b + 8, QW_MODEL_VERSION);
	qw_le_put32(b + 12, m->dynamics);
	qw_le_put32(b + 16, m->mode);
	qw_le_put32(b + 20, 0);
	model_putd(b + 24, m->smoothing);
	qw_le_put64(b + 32, m->readings);
	qw_le_put64(b + 40, m->used);
	qw_le_put64(b + 48, m->trimmed);
	qw_le_put64(b + 56, m->heldout);
	model_putd(b + 64, m->limit_factor);
	model_putd(b + 72, m->limit_gauss);
	model_putd(b + 80, m->limit_emp);
	model_putd(b + 88, m->alpha);
	model_putd(b + 96, m->consistency);
	model_putd(b + 104, m->gpd_xi);
	model_putd(b + 112, m->gpd_sigma);
	model_putd(b + 120, m->adapt_factor);
	qw_le_put64(b + 128, m->adapt_scored);
	model_putd(b + 136, m->adapt_gpd_xi);
	model_putd(b + 144, m->adapt_gpd_sigma);
}

int qw_model_encode(void *out, size_t cap, const struct qw_ckpt_id *id,
		    const struct qw_model_meta *m, const void *state,
		    size_t state_len, size_t *len)
{
	size_t n = id->group != NULL ? strlen(id->group) : 0;
	unsigned char *pl = (unsigned char *)out + QW_CKPT_HEADER + n;

	*len = 0;
	if (n < 1 || n > QW_CKPT_NAME_MAX)
		return QW_ERROR(QW_EINVAL);
	if (cap < qw_model_encoded_len(n, state_len))
		return QW_ERROR(QW_EOVERSIZE);
	/* payload in place, then the checkpoint codec wraps it */
	if (state_len > 0 && state != pl + QW_MODEL_META_LEN)
		memmove(pl + QW_MODEL_META_LEN, state, state_len);
	model_put_meta(pl, m);
	return qw_ckpt_encode(out, cap, id, 0, pl,
			      qw_model_payload_len(state_len), len);
}

/* Values a fit can produce; QW_EFORMAT otherwise. */
static int model_meta_ok(const struct qw_model_meta *m)
{
	if (m->dynamics >= MODEL_NDYN || m->mode >= MODEL_NMODE ||
	    m->used > m->readings || m->trimmed > m->readings ||
	    !(m->limit_factor > 0) || !isfinite(m->limit_factor) ||
	    !(m->alpha > 0 && m->alpha < 1) || !(m->consistency > 0) ||
	    !isfinite(m->consistency) ||
	    (m->version >= 2 && (!(m->adapt_factor > 0) ||
				 !isfinite(m->adapt_factor))))
		return QW_ERROR(QW_EFORMAT);
	return 0;
}

int qw_model_decode(const void *buf, size_t len, struct qw_model_view *v)
{
	const unsigned char *b;
	struct qw_model_meta *m = &v->meta;
	size_t meta_len;
	int rc;

	memset(v, 0, sizeof *v);
	if ((rc = qw_ckpt_decode(buf, len, NULL, &v->ck)) != 0)
		return rc;
	b = v->ck.state;
	if (v->ck.state_len < QW_MODEL_META_LEN_V1 ||
	    memcmp(b, QW_MODEL_MAGIC, QW_MODEL_MAGIC_LEN) != 0)
		return QW_ERROR(QW_EFORMAT);
	m->version = qw_le_get32(b + 8);
	if (m->version != 1 && m->version != QW_MODEL_VERSION)
		return QW_ERROR(QW_EVERSION);
	meta_len = m->version == 1 ? QW_MODEL_META_LEN_V1 : QW_MODEL_META_LEN;
	if (v->ck.state_len < meta_len)
		return QW_ERROR(QW_EFORMAT);
	m->dynamics = qw_le_get32(b + 12);
	m->mode = qw_le_get32(b + 16);
	m->smoothing = model_getd(b + 24);
	m->readings = qw_le_get64(b + 32);
	m->used = qw_le_get64(b + 40);
	m->trimmed = qw_le_get64(b + 48);
	m->heldout = qw_le_get64(b + 56);
	m->limit_factor = model_getd(b + 64);
	m->limit_gauss = model_getd(b + 72);
	m->limit_emp = model_getd(b + 80);
	m->alpha = model_getd(b + 88);
	m->consistency = model_getd(b + 96);
	m->gpd_xi = model_getd(b + 104);
	m->gpd_sigma = model_getd(b + 112);
	if (m->version >= 2) {
		m->adapt_factor = model_getd(b + 120);
		m->adapt_scored = qw_le_get64(b + 128);
		m->adapt_gpd_xi = model_getd(b + 136);
		m->adapt_gpd_sigma = model_getd(b + 144);
	} else {
		m->adapt_factor = NAN;
		m->adapt_gpd_xi = m->adapt_gpd_sigma = NAN;
	}
	if ((rc = model_meta_ok(m)) != 0)
		return rc;
	v->state = b + meta_len;
	v->state_len = v->ck.state_len - meta_len;
	return 0;
}

int qw_model_save(const char *path, const struct qw_ckpt_id *id,
		  const struct qw_model_meta *m, const qw_detector *d,
		  char *err, size_t errlen)
{
	size_t slen = qw_detector_state_len(d), n = strlen(id->group), len;
	size_t total = qw_model_encoded_len(n, slen);
	unsigned char *buf = malloc(total);
	int rc;

	if (buf == NULL) {
		qw_errbuf(err, errlen, "%s: no memory for %zu bytes", path,
			  total);
		return QW_ERROR(QW_ENOMEM);
	}
	qw_detector_state_get(d, buf + QW_CKPT_HEADER + n + QW_MODEL_META_LEN);
	rc = qw_model_encode(buf, total, id, m,
			     buf + QW_CKPT_HEADER + n + QW_MODEL_META_LEN,
			     slen, &len);
	if (rc == 0)
		rc = qw_ckpt_write_file(path, buf, len, err, errlen);
	else
		qw_errbuf(err, errlen, "%s: %s", path, qw_strerror(rc));
	free(buf);
	return rc;
}

/* Why a file is not a usable model. */
static const char *model_why(int rc)
{
	switch (rc) {
	case QW_ETRUNC: return "truncated";
	case QW_EFORMAT: return "not a model file from quadwatch fit";
	case QW_EVERSION: return "another format version: fit again";
	case QW_ECHECKSUM: return "checksum mismatch (corrupt)";
	case QW_EMISMATCH: return "written on a machine of another byte order";
	case QW_EOVERSIZE: return "larger than any model file";
	default: return qw_strerror(rc);
	}
}

static const char *model_name(const char *const *names, unsigned n,
			      uint32_t v)
{
	return v < n ? names[v] : "?";
}

/* The file's fit against group gc: 0, or QW_EMISMATCH with why in err. */
static int model_match(const char *path, const struct qw_model_view *v,
		       const struct qw_group_conf *gc, char *err,
		       size_t errlen)
{
	const struct qw_params *par = &gc->params;

	if (v->ck.p != gc->p || v->ck.fingerprint != qw_config_fingerprint(gc)) {
		qw_errbuf(err, errlen, "%s: fitted for group '%.*s' with %u "
			  "channels; group %s's channels (%zu) are not the "
			  "same names in the same order: fit again", path,
			  (int)v->ck.group_len, v->ck.group, v->ck.p,
			  gc->name, gc->p);
		return QW_ERROR(QW_EMISMATCH);
	}
	if (v->meta.dynamics != (uint32_t)par->dynamics) {
		qw_errbuf(err, errlen, "%s: fitted with dynamics = %s; group "
			  "%s has dynamics = %s", path,
			  model_name(model_dyn_names, MODEL_NDYN,
				     v->meta.dynamics), gc->name,
			  model_name(model_dyn_names, MODEL_NDYN,
				     (uint32_t)par->dynamics));
		return QW_ERROR(QW_EMISMATCH);
	}
	if (v->meta.mode != (uint32_t)par->mode ||
	    (par->mode == QW_MODE_MEWMA && v->meta.smoothing != par->smoothing)) {
		qw_errbuf(err, errlen, "%s: fitted with mode = %s (smoothing "
			  "%g); group %s has mode = %s (smoothing %g)", path,
			  model_name(model_mode_names, MODEL_NMODE,
				     v->meta.mode), v->meta.smoothing,
			  gc->name, model_name(model_mode_names, MODEL_NMODE,
					       (uint32_t)par->mode),
			  par->smoothing);
		return QW_ERROR(QW_EMISMATCH);
	}
	return 0;
}

/* A detector for gc from the decoded model v.  0 or a code (err set). */
static int model_build(const char *path, const struct qw_model_view *v,
		       const struct qw_group_conf *gc, qw_detector **out,
		       char *err, size_t errlen)
{
	struct qw_params par = gc->params;
	qw_detector *d;
	int rc;

	if (gc->model_use == QW_MODEL_WARM && v->meta.version < 2) {
		qw_errbuf(err, errlen, "%s: written by an older quadwatch fit "
			  "(model format %u), which measured no limit for the "
			  "adaptive chart that model_use = warm runs: fit "
			  "again, or use model_use = fixed", path,
			  (unsigned)v->meta.version);
		return QW_ERROR(QW_EVERSION);
	}
	par.limit_factor *= qw_model_factor(&v->meta, gc->model_use);
	d = qw_detector_alloc(&par);
	if (d == NULL) {
		qw_errbuf(err, errlen, "%s: group %s: out of memory", path,
			  gc->name);
		return QW_ERROR(QW_ENOMEM);
	}
	rc = v->state_len == qw_detector_state_len(d)
	     ? qw_detector_state_set(d, v->state, v->state_len)
	     : QW_ERROR(QW_EMISMATCH);
	if (rc != 0) {
		qw_errbuf(err, errlen, "%s: its model does not fit group %s "
			  "(%s): fit again", path, gc->name,
			  rc == QW_EMISMATCH ? "another state size"
					     : qw_strerror(rc));
		qw_detector_free(d);
		return rc;
	}
	qw_detector_freeze(d, gc->model_use == QW_MODEL_FIXED);
	qw_detector_counters_reset(d); /* the group counts its own readings */
	*out = d;
	return 0;
}

double qw_model_factor(const struct qw_model_meta *m, int use)
{
	return use == QW_MODEL_WARM ? m->adapt_factor : m->limit_factor;
}

int qw_model_detector(const struct qw_group_conf *gc, qw_detector **out,
		      struct qw_model_meta *meta, char *err, size_t errlen)
{
	struct qw_model_view v;
	unsigned char *buf = NULL;
	size_t len = 0;
	int rc;

	*out = NULL;
	if (gc->model[0] == '\0') {
		*out = qw_detector_alloc(&gc->params);
		if (*out != NULL)
			return 0;
		qw_errbuf(err, errlen, "group %s: out of memory", gc->name);
		return QW_ERROR(QW_ENOMEM);
	}
	rc = qw_ckpt_read(gc->model, &buf, &len);
	if (rc != 0) {
		qw_errbuf(err, errlen, "%s (model of group %s): cannot read: "
			  "%s", gc->model, gc->name, rc == QW_ENODATA
			  ? "no such file" : rc == QW_EIO ? strerror(errno)
			  : model_why(rc));
		return rc;
	}
	rc = qw_model_decode(buf, len, &v);
	if (rc != 0)
		qw_errbuf(err, errlen, "%s (model of group %s): %s", gc->model,
			  gc->name, model_why(rc));
	if (rc == 0)
		rc = model_match(gc->model, &v, gc, err, errlen);
	if (rc == 0)
		rc = model_build(gc->model, &v, gc, out, err, errlen);
	if (rc == 0 && meta != NULL)
		*meta = v.meta;
	free(buf);
	return rc;
}
