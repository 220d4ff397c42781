/* checkpoint.h: one group's learned state in a file, written atomically and
 * refused whole when it is corrupt, truncated, from another format version
 * or for another configuration (see checkpoint.c for the layout, and
 * docs/operations.md for what is saved when). */
#ifndef QW_CHECKPOINT_H
#define QW_CHECKPOINT_H

#include <stddef.h>
#include <stdint.h>

#include "quadwatch.h"

#define QW_CKPT_MAGIC "QWST\r\n\032\n" /* 8 bytes, PNG-style: a text-mode
					   copy or a truncated ASCII file
					   cannot pass for a checkpoint */
#define QW_CKPT_MAGIC_LEN 8
#define QW_CKPT_VERSION 2u           /* format version of this layout (2: whitening, MEWMA and fixed-model state) */
#define QW_CKPT_ORDER 0x01020304u    /* written in host order: tells the
					payload's byte order */
#define QW_CKPT_HEADER 48            /* bytes before the group name */
#define QW_CKPT_TRAILER 4            /* bytes: CRC-32 at the end */
#define QW_CKPT_NAME_MAX 63          /* bytes of a group name */
#define QW_CKPT_FILE_MAX ((size_t)128 << 20) /* bytes: a detector at
					QW_MAX_P = 4096 holds ~67 MB */
#define QW_CKPT_SUFFIX ".qwstate"    /* DIR/GROUP.qwstate */
#define QW_CKPT_TMP_SUFFIX ".tmp"    /* DIR/GROUP.qwstate.tmp while written */
#define QW_CKPT_REJECT_SUFFIX ".rejected-" /* DIR/GROUP.qwstate.rejected-EPOCH */
#define QW_CKPT_PATH_MAX 1200        /* bytes of a checkpoint path */

/* Who a checkpoint belongs to.  A file is only restored into the group
 * with the same name, p and configuration fingerprint. */
struct qw_ckpt_id {
	const char *group;     /* group name: 1..QW_CKPT_NAME_MAX bytes,
				  no '/' (it names the file) */
	uint64_t fingerprint;  /* qw_config_fingerprint of the group */
	uint32_t p;            /* channels */
};

/* A decoded checkpoint; pointers into the caller's buffer. */
struct qw_ckpt_view {
	uint32_t version, p;
	uint64_t fingerprint;
	const char *group;     /* NOT NUL-terminated: group_len bytes */
	size_t group_len;
	int64_t saved_ns;      /* wall clock at save, ns since the epoch */
	const unsigned char *state; /* qw_detector_state_* bytes */
	size_t state_len;
};

/* CRC-32 (IEEE 802.3, reflected 0xEDB88320, init and final xor ~0) of
 * len bytes, continuing from crc (0 to start). */
uint32_t qw_ckpt_crc32(uint32_t crc, const void *buf, size_t len);

/* Bytes of the file for a group name of name_len and state_len bytes. */
size_t qw_ckpt_encoded_len(size_t name_len, size_t state_len);

/* Writes the file image into out (cap bytes): *len set on success.
 * QW_EINVAL for a bad id, QW_EOVERSIZE when cap is too small. */
int qw_ckpt_encode(void *out, size_t cap, const struct qw_ckpt_id *id,
		   int64_t saved_ns, const void *state, size_t state_len,
		   size_t *len);

/* Checks the image buf[0..len) and fills *v.  Every length is checked
 * against len before anything is read.  Errors, in the order tested:
 * QW_ETRUNC (shorter than its header says), QW_EFORMAT (not a checkpoint,
 * bad lengths, trailing bytes), QW_EVERSION (another format version),
 * QW_ECHECKSUM (CRC mismatch), QW_EMISMATCH (other byte order; or, when
 * want is not NULL, another group name, p or fingerprint). */
int qw_ckpt_decode(const void *buf, size_t len, const struct qw_ckpt_id *want,
		   struct qw_ckpt_view *v);

/* DIR/GROUP.qwstate into out (cap bytes).  QW_EINVAL for a bad name,
 * QW_EOVERSIZE when it does not fit. */
int qw_ckpt_path(char *out, size_t cap, const char *dir, const char *group);

/* Writes buf[0..len) to path atomically: path.tmp in the same directory,
 * write, fsync, rename over path, fsync the directory.  On failure the old
 * file (if any) is untouched and the temporary removed; QW_EIO with the
 * call and strerror in err. */
int qw_ckpt_write_file(const char *path, const void *buf, size_t len,
		       char *err, size_t errlen);

/* Saves detector d as id's checkpoint in dir.  Allocates a buffer of the
 * file's size (a timer's or an operator's work, never a reading's).
 * 0, QW_ENOMEM, QW_EINVAL or QW_EIO with a message in err. */
int qw_ckpt_save(const char *dir, const struct qw_ckpt_id *id,
		 const qw_detector *d, char *err, size_t errlen);

/* Restores id's checkpoint from dir into d.  Returns 0 (restored; *saved_ns
 * when not NULL gets the save time), QW_ENODATA (no file: start fresh),
 * QW_EIO (the file exists but cannot be read; left in place), or a refusal:
 * QW_ETRUNC, QW_EFORMAT, QW_EVERSION, QW_ECHECKSUM, QW_EMISMATCH,
 * QW_EOVERSIZE, or what qw_detector_state_set says of the payload.  A
 * refused file is renamed to DIR/GROUP.qwstate.rejected-EPOCH (its path in
 * err) and d is left as it was.  err always says what happened. */
int qw_ckpt_restore(const char *dir, const struct qw_ckpt_id *id,
		    qw_detector *d, int64_t *saved_ns, char *err,
		    size_t errlen);

/* Reads the whole of path (at most QW_CKPT_FILE_MAX bytes) into a new
 * buffer *out (the caller frees it).  0, QW_ENODATA (no file),
 * QW_EOVERSIZE, QW_ENOMEM, or QW_EIO with errno set. */
int qw_ckpt_read(const char *path, unsigned char **out, size_t *len);

/* Renames path to path.rejected-EPOCH (EPOCH: wall-clock seconds; a
 * counter is appended when that name is taken).  The new name goes to
 * aside (cap bytes).  0 or QW_EIO. */
int qw_ckpt_reject(const char *path, char *aside, size_t cap);

#endif
