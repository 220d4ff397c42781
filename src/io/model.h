/* model.h: a group's model fitted from a healthy recording (`quadwatch
 * fit`), in a file that `run` and `replay` load through the group keys
 * model = PATH and model_use = fixed | warm (quadwatch.ini(5)).  The file
 * is a checkpoint image (checkpoint.h: magic, version, CRC-32) whose
 * payload is the fit's metadata followed by the detector's state; see
 * model.c for the layout. */
#ifndef QW_MODEL_H
#define QW_MODEL_H

#include <stddef.h>
#include <stdint.h>

#include "checkpoint.h"
#include "config.h"
#include "quadwatch.h"

#define QW_MODEL_MAGIC "QWFITMD1"  /* 8 bytes at the start of the payload */
#define QW_MODEL_MAGIC_LEN 8
#define QW_MODEL_VERSION 2u         /* version of the metadata layout */
#define QW_MODEL_META_LEN 152       /* bytes of metadata before the state */
#define QW_MODEL_META_LEN_V1 120    /* version 1: no adaptive factor */
#define QW_MODEL_SUFFIX ".qwmodel"  /* DIR/GROUP.qwmodel */

/* What the fit found, kept beside the model. */
struct qw_model_meta {
	uint32_t dynamics;     /* enum qw_dynamics of the fitted group */
	uint32_t mode;         /* enum qw_mode */
	double smoothing;      /* mewma rho of the fitted group */
	uint64_t readings;     /* readings of the recording offered */
	uint64_t used;         /* learned by the model */
	uint64_t trimmed;      /* left out as far out */
	uint64_t heldout;      /* held-out readings behind the tail */
	double limit_factor;   /* empirical / Gaussian limit: becomes the
				  loaded group's limit_factor */
	double limit_gauss;    /* the fixed model's limit, Gaussian theory */
	double limit_emp;      /* the empirical limit */
	double alpha;          /* per-reading alpha at the fit */
	double consistency;    /* trimming factor applied to the covariance */
	double gpd_xi, gpd_sigma; /* the tail fit (NaN when none) */
	/* version 2: the group's adaptive chart over the recording */
	double adapt_factor;   /* its empirical / Gaussian limit: a warm
				  group's limit_factor (NaN in version 1) */
	uint64_t adapt_scored; /* its scores behind the tail */
	double adapt_gpd_xi, adapt_gpd_sigma; /* its tail fit (NaN: none) */
	uint32_t version;      /* of the file (decoded; written as
				  QW_MODEL_VERSION) */
};

/* A decoded model file; pointers into the caller's buffer. */
struct qw_model_view {
	struct qw_ckpt_view ck;       /* group name, p, fingerprint */
	struct qw_model_meta meta;
	const unsigned char *state;   /* qw_detector_state_* bytes */
	size_t state_len;
};

/* Bytes of the payload (metadata + state) and of the whole file. */
size_t qw_model_payload_len(size_t state_len);
size_t qw_model_encoded_len(size_t name_len, size_t state_len);

/* The file image of id's model into out (cap bytes): *len on success.
 * QW_EINVAL (bad id), QW_EOVERSIZE (cap too small). */
int qw_model_encode(void *out, size_t cap, const struct qw_ckpt_id *id,
		    const struct qw_model_meta *m, const void *state,
		    size_t state_len, size_t *len);
/* Checks the image and fills *v: the checkpoint checks (QW_ETRUNC,
 * QW_EFORMAT, QW_EVERSION, QW_ECHECKSUM, QW_EMISMATCH for another byte
 * order), then QW_EFORMAT when the payload is not a model (a checkpoint
 * is not one) or a value is impossible, QW_EVERSION for a metadata
 * version other than 1 and 2 (version 1 decodes with adapt_factor NaN). */
int qw_model_decode(const void *buf, size_t len, struct qw_model_view *v);

/* Writes detector d (the fit's final model) with m as id's model file at
 * path, atomically.  0, QW_ENOMEM, QW_EINVAL or QW_EIO (message in err). */
int qw_model_save(const char *path, const struct qw_ckpt_id *id,
		  const struct qw_model_meta *m, const qw_detector *d,
		  char *err, size_t errlen);

/* The detector of group gc: from gc->params when gc has no model key;
 * otherwise from the model file, refused (QW_EMISMATCH, QW_EFORMAT, ...,
 * with a message naming the file and what differs in err) unless it was
 * fitted for the same channels, dynamics and mode.  model_use = fixed:
 * frozen, the fitted limit factor applied; warm: the adaptive group
 * starts from the fitted model, with the adaptive chart's factor
 * (QW_EVERSION for a version 1 file, which has none).  meta, when not
 * NULL, gets the file's metadata. */
int qw_model_detector(const struct qw_group_conf *gc, qw_detector **out,
		      struct qw_model_meta *meta, char *err, size_t errlen);
/* The limit factor a group with model_use = use applies from m. */
double qw_model_factor(const struct qw_model_meta *m, int use);

#endif
