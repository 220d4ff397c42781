/* checkpoint.c: a group's learned state (qw_detector_state_get bytes) in a
 * file, DIR/GROUP.qwstate, that survives a crash at any instant and is
 * refused whole when anything about it is wrong.
 *
 * Layout (header fields little endian; the payload in host order, as the
 * core defines it, with the byte order recorded):
 *     0  magic       8 bytes  "QWST\r\n\032\n"
 *     8  version     u32      QW_CKPT_VERSION
 *    12  order       u32      0x01020304 in the writer's byte order
 *    16  fingerprint u64      qw_config_fingerprint (p, channel names)
 *    24  p           u32      channels
 *    28  name_len    u32      1..QW_CKPT_NAME_MAX
 *    32  saved_ns    i64      wall clock at save, ns since the epoch
 *    40  state_len   u64      payload bytes
 *    48  name        name_len bytes, then the payload, state_len bytes
 *   end  crc         u32      CRC-32 (IEEE) of every byte before it
 * The sizes are checked against the file's length before anything past
 * the header is read; the CRC covers the header too, so a flipped bit
 * anywhere is caught (CRC-32 detects every burst up to 32 bits; Koopman,
 * "32-Bit Cyclic Redundancy Codes for Internet Applications", 2002).
 *
 * Writing follows the usual crash-safe sequence: write GROUP.qwstate.tmp
 * in the same directory, fsync it, rename it over GROUP.qwstate, fsync the
 * directory; a crash leaves either the old file or the new one.  A refused
 * file is renamed aside (GROUP.qwstate.rejected-EPOCH) for inspection.
 *
 * Workload: one file per group every [state] every seconds (10 s by
 * default); p = 64 is ~17 kB, p = 4096 ~67 MB.  Allocation is fine here. */
#include <errno.h>
#include <fcntl.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include "bytes.h"
#include "checkpoint.h"
#include "log.h"

#define CKPT_CRC_POLY 0xEDB88320u /* CRC-32 IEEE 802.3, reflected */
#define CKPT_REJECT_TRIES 100     /* names tried when setting a file aside */

/* ---- bytes -------------------------------------------------------------- */

uint32_t qw_ckpt_crc32(uint32_t crc, const void *buf, size_t len)
{
	/* Nibble-wise table: x^32 remainders of the 16 four-bit values, from
	 * the reflected polynomial (small enough to keep as a constant). */
	static const uint32_t tab[16] = {
		0x00000000u, 0x1DB71064u, 0x3B6E20C8u, 0x26D930ACu,
		0x76DC4190u, 0x6B6B51F4u, 0x4DB26158u, 0x5005713Cu,
		0xEDB88320u, 0xF00F9344u, 0xD6D6A3E8u, 0xCB61B38Cu,
		0x9B64C2B0u, 0x86D3D2D4u, 0xA00AE278u, 0xBDBDF21Cu};
	const unsigned char *b = buf;
	size_t i;

	crc = ~crc;
	for (i = 0; i < len; i++) {
		crc ^= b[i];
		crc = (crc >> 4) ^ tab[crc & 0xfu];
		crc = (crc >> 4) ^ tab[crc & 0xfu];
	}
	return ~crc;
}

static int ckpt_name_ok(const char *name, size_t *len)
{
	size_t n = name != NULL ? strlen(name) : 0;

	*len = n;
	return n >= 1 && n <= QW_CKPT_NAME_MAX && strchr(name, '/') == NULL;
}

size_t qw_ckpt_encoded_len(size_t name_len, size_t state_len)
{
	return QW_CKPT_HEADER + name_len + state_len + QW_CKPT_TRAILER;
}

int qw_ckpt_encode(void *out, size_t cap, const struct qw_ckpt_id *id,
		   int64_t saved_ns, const void *state, size_t state_len,
		   size_t *len)
{
	unsigned char *b = out;
	uint32_t order = QW_CKPT_ORDER;
	size_t n, total;

	*len = 0;
	if (!ckpt_name_ok(id->group, &n) || state_len > QW_CKPT_FILE_MAX)
		return QW_ERROR(QW_EINVAL);
	total = qw_ckpt_encoded_len(n, state_len);
	if (cap < total)
		return QW_ERROR(QW_EOVERSIZE);
	memcpy(b, QW_CKPT_MAGIC, QW_CKPT_MAGIC_LEN);
	qw_le_put32(b + 8, QW_CKPT_VERSION);
	memcpy(b + 12, &order, sizeof order); /* host order, on purpose */
	qw_le_put64(b + 16, id->fingerprint);
	qw_le_put32(b + 24, id->p);
	qw_le_put32(b + 28, (uint32_t)n);
	qw_le_put64(b + 32, (uint64_t)saved_ns);
	qw_le_put64(b + 40, (uint64_t)state_len);
	memcpy(b + QW_CKPT_HEADER, id->group, n);
	if (state_len > 0 && state != b + QW_CKPT_HEADER + n)
		memcpy(b + QW_CKPT_HEADER + n, state, state_len);
	qw_le_put32(b + total - QW_CKPT_TRAILER,
		   qw_ckpt_crc32(0, b, total - QW_CKPT_TRAILER));
	*len = total;
	return 0;
}

/* The header's identity against want (NULL: anything). */
static int ckpt_match(const struct qw_ckpt_view *v,
		      const struct qw_ckpt_id *want)
{
	size_t n;

	if (want == NULL)
		return 0;
	if (!ckpt_name_ok(want->group, &n) || n != v->group_len ||
	    memcmp(want->group, v->group, n) != 0 || want->p != v->p ||
	    want->fingerprint != v->fingerprint)
		return QW_ERROR(QW_EMISMATCH);
	return 0;
}

int qw_ckpt_decode(const void *buf, size_t len, const struct qw_ckpt_id *want,
		   struct qw_ckpt_view *v)
{
	const unsigned char *b = buf;
	uint64_t state_len, total;
	uint32_t name_len, order;

	memset(v, 0, sizeof *v);
	if (len < QW_CKPT_MAGIC_LEN)
		return QW_ERROR(len == 0 || memcmp(b, QW_CKPT_MAGIC, len) == 0
				? QW_ETRUNC : QW_EFORMAT);
	if (memcmp(b, QW_CKPT_MAGIC, QW_CKPT_MAGIC_LEN) != 0)
		return QW_ERROR(QW_EFORMAT);
	if (len < QW_CKPT_HEADER)
		return QW_ERROR(QW_ETRUNC);
	v->version = qw_le_get32(b + 8);
	if (v->version != QW_CKPT_VERSION)
		return QW_ERROR(QW_EVERSION);
	name_len = qw_le_get32(b + 28);
	state_len = qw_le_get64(b + 40);
	if (name_len < 1 || name_len > QW_CKPT_NAME_MAX ||
	    state_len > QW_CKPT_FILE_MAX)
		return QW_ERROR(QW_EFORMAT);
	/* both terms bounded above: no overflow */
	total = qw_ckpt_encoded_len(name_len, (size_t)state_len);
	if (len < total)
		return QW_ERROR(QW_ETRUNC);
	if (len > total)
		return QW_ERROR(QW_EFORMAT); /* trailing bytes */
	if (qw_ckpt_crc32(0, b, len - QW_CKPT_TRAILER) !=
	    qw_le_get32(b + len - QW_CKPT_TRAILER))
		return QW_ERROR(QW_ECHECKSUM);
	memcpy(&order, b + 12, sizeof order);
	if (order != QW_CKPT_ORDER)
		return QW_ERROR(QW_EMISMATCH); /* written on another machine */
	v->fingerprint = qw_le_get64(b + 16);
	v->p = qw_le_get32(b + 24);
	v->saved_ns = (int64_t)qw_le_get64(b + 32);
	v->group = (const char *)b + QW_CKPT_HEADER;
	v->group_len = name_len;
	v->state = b + QW_CKPT_HEADER + name_len;
	v->state_len = (size_t)state_len;
	return ckpt_match(v, want);
}

/* ---- files -------------------------------------------------------------- */

int qw_ckpt_path(char *out, size_t cap, const char *dir, const char *group)
{
	size_t n;
	int w;

	if (!ckpt_name_ok(group, &n) || dir == NULL || dir[0] == '\0')
		return QW_ERROR(QW_EINVAL);
	w = snprintf(out, cap, "%s/%s%s", dir, group, QW_CKPT_SUFFIX);
	if (w < 0 || (size_t)w >= cap)
		return QW_ERROR(QW_EOVERSIZE);
	return 0;
}

/* Writes all of buf to fd, through short writes and EINTR. */
static int ckpt_write_all(int fd, const unsigned char *buf, size_t len)
{
	ssize_t w;

	while (len > 0) {
		w = write(fd, buf, len);
		if (w < 0 && errno == EINTR)
			continue;
		if (w <= 0) {
			if (w == 0)
				errno = EIO;
			return QW_ERROR(QW_EIO);
		}
		buf += w;
		len -= (size_t)w;
	}
	return 0;
}

/* fsync of the directory holding path, so the rename itself is durable. */
static int ckpt_sync_dir(const char *path)
{
	char dir[QW_CKPT_PATH_MAX];
	const char *slash = strrchr(path, '/');
	size_t n = slash == NULL ? 1 : (size_t)(slash - path);
	int fd, rc;

	if (n == 0)
		n = 1; /* "/file": the root */
	if (n >= sizeof dir) {
		errno = ENAMETOOLONG;
		return QW_ERROR(QW_EIO);
	}
	memcpy(dir, slash == NULL ? "." : path, n);
	dir[n] = '\0';
	fd = open(dir, O_RDONLY | O_DIRECTORY | O_CLOEXEC);
	if (fd < 0)
		return QW_ERROR(QW_EIO);
	rc = fsync(fd);
	close(fd);
	return rc != 0 ? QW_ERROR(QW_EIO) : 0;
}

int qw_ckpt_write_file(const char *path, const void *buf, size_t len,
		       char *err, size_t errlen)
{
	char tmp[QW_CKPT_PATH_MAX];
	const char *step = "open";
	int fd, rc, e;

	if (snprintf(tmp, sizeof tmp, "%s%s", path, QW_CKPT_TMP_SUFFIX) >=
	    (int)sizeof tmp) {
		qw_errbuf(err, errlen, "%s: path too long", path);
		return QW_ERROR(QW_EIO);
	}
	fd = open(tmp, O_WRONLY | O_CREAT | O_TRUNC | O_NOFOLLOW | O_CLOEXEC,
		  0600);
	if (fd < 0) {
		qw_errbuf(err, errlen, "%s: open: %s", tmp, strerror(errno));
		return QW_ERROR(QW_EIO);
	}
	rc = ckpt_write_all(fd, buf, len);
	if (rc == 0 && (step = "fsync", fsync(fd) != 0))
		rc = QW_ERROR(QW_EIO);
	e = errno;
	if (close(fd) != 0 && rc == 0) {
		step = "close";
		e = errno;
		rc = QW_ERROR(QW_EIO);
	}
	if (rc == 0 && rename(tmp, path) != 0) {
		step = "rename";
		e = errno;
		rc = QW_ERROR(QW_EIO);
	}
	if (rc != 0) {
		if (strcmp(step, "open") == 0)
			step = "write";
		qw_errbuf(err, errlen, "%s: %s: %s", tmp, step, strerror(e));
		unlink(tmp);
		return rc;
	}
	if (ckpt_sync_dir(path) != 0) {
		qw_errbuf(err, errlen, "%s: fsync of its directory: %s", path,
			 strerror(errno));
		return QW_ERROR(QW_EIO);
	}
	return 0;
}

static int64_t ckpt_now_ns(void)
{
	struct timespec ts;

	clock_gettime(CLOCK_REALTIME, &ts);
	return (int64_t)ts.tv_sec * 1000000000 + (int64_t)ts.tv_nsec;
}

int qw_ckpt_save(const char *dir, const struct qw_ckpt_id *id,
		 const qw_detector *d, char *err, size_t errlen)
{
	char path[QW_CKPT_PATH_MAX];
	size_t slen = qw_detector_state_len(d), n, total, len;
	unsigned char *buf;
	int rc;

	if ((rc = qw_ckpt_path(path, sizeof path, dir, id->group)) != 0) {
		qw_errbuf(err, errlen, "group %s: no usable checkpoint path "
			 "in %s", id->group != NULL ? id->group : "?",
			 dir != NULL ? dir : "?");
		return rc;
	}
	ckpt_name_ok(id->group, &n);
	total = qw_ckpt_encoded_len(n, slen);
	buf = malloc(total);
	if (buf == NULL) {
		qw_errbuf(err, errlen, "%s: no memory for %zu bytes", path,
			 total);
		return QW_ERROR(QW_ENOMEM);
	}
	qw_detector_state_get(d, buf + QW_CKPT_HEADER + n);
	/* encode in place: the payload already sits where it belongs */
	rc = qw_ckpt_encode(buf, total, id, ckpt_now_ns(),
			    buf + QW_CKPT_HEADER + n, slen, &len);
	if (rc == 0)
		rc = qw_ckpt_write_file(path, buf, len, err, errlen);
	else
		qw_errbuf(err, errlen, "%s: %s", path, qw_strerror(rc));
	free(buf);
	return rc;
}

/* Reads the whole of path (at most QW_CKPT_FILE_MAX bytes) into a new
 * buffer.  QW_ENODATA when there is no file, QW_EOVERSIZE when too big,
 * QW_EIO otherwise (errno set). */
static int ckpt_read_file(const char *path, unsigned char **out, size_t *len)
{
	struct stat st = {0};
	unsigned char *buf;
	size_t got = 0, n;
	ssize_t r;
	int fd = open(path, O_RDONLY | O_NOFOLLOW | O_CLOEXEC);

	*out = NULL;
	*len = 0;
	if (fd < 0)
		return QW_ERROR(errno == ENOENT ? QW_ENODATA : QW_EIO);
	if (fstat(fd, &st) != 0 || !S_ISREG(st.st_mode)) {
		int e = S_ISREG(st.st_mode) ? errno : EINVAL;

		close(fd);
		errno = e; /* EINVAL: not a regular file */
		return QW_ERROR(QW_EIO);
	}
	if ((uint64_t)st.st_size > QW_CKPT_FILE_MAX) {
		close(fd);
		return QW_ERROR(QW_EOVERSIZE);
	}
	n = (size_t)st.st_size;
	buf = malloc(n > 0 ? n : 1);
	while (buf != NULL && got < n) {
		r = read(fd, buf + got, n - got);
		if (r < 0 && errno == EINTR)
			continue;
		if (r <= 0)
			break; /* shrank under us: decode sees it short */
		got += (size_t)r;
	}
	close(fd);
	if (buf == NULL)
		return QW_ERROR(QW_ENOMEM);
	*out = buf;
	*len = got;
	return 0;
}

int qw_ckpt_read(const char *path, unsigned char **out, size_t *len)
{
	return ckpt_read_file(path, out, len);
}

int qw_ckpt_reject(const char *path, char *aside, size_t cap)
{
	long epoch = (long)(ckpt_now_ns() / 1000000000);
	struct stat st;
	int k, w;

	for (k = 0; k < CKPT_REJECT_TRIES; k++) {
		w = k == 0 ? snprintf(aside, cap, "%s%s%ld", path,
				      QW_CKPT_REJECT_SUFFIX, epoch)
			   : snprintf(aside, cap, "%s%s%ld.%d", path,
				      QW_CKPT_REJECT_SUFFIX, epoch, k);
		if (w < 0 || (size_t)w >= cap) {
			errno = ENAMETOOLONG;
			return QW_ERROR(QW_EIO);
		}
		if (lstat(aside, &st) != 0 && errno == ENOENT)
			break; /* free name */
	}
	if (k == CKPT_REJECT_TRIES) {
		errno = EEXIST;
		return QW_ERROR(QW_EIO);
	}
	if (rename(path, aside) != 0)
		return QW_ERROR(QW_EIO);
	ckpt_sync_dir(path); /* best effort: the rename is not precious */
	return 0;
}

/* Why a file was refused, for the log. */
static const char *ckpt_why(int rc)
{
	switch (rc) {
	case QW_ETRUNC: return "truncated";
	case QW_EFORMAT: return "not a valid checkpoint";
	case QW_EVERSION: return "another format version";
	case QW_ECHECKSUM: return "checksum mismatch (corrupt)";
	case QW_EMISMATCH: return "written for another configuration "
				  "(group, channels or machine)";
	case QW_EOVERSIZE: return "larger than any checkpoint";
	default: return qw_strerror(rc);
	}
}

/* Checks buf and loads its payload into d.  0 or a refusal code. */
static int ckpt_apply(const unsigned char *buf, size_t len,
		      const struct qw_ckpt_id *id, qw_detector *d,
		      int64_t *saved_ns)
{
	struct qw_ckpt_view v;
	int rc = qw_ckpt_decode(buf, len, id, &v);

	if (rc != 0)
		return rc;
	if (v.state_len != qw_detector_state_len(d))
		return QW_ERROR(QW_EMISMATCH);
	rc = qw_detector_state_set(d, v.state, v.state_len);
	if (rc == 0 && saved_ns != NULL)
		*saved_ns = v.saved_ns;
	return rc;
}

int qw_ckpt_restore(const char *dir, const struct qw_ckpt_id *id,
		    qw_detector *d, int64_t *saved_ns, char *err,
		    size_t errlen)
{
	char path[QW_CKPT_PATH_MAX], aside[QW_CKPT_PATH_MAX + 32];
	unsigned char *buf;
	size_t len;
	int rc, e;

	if ((rc = qw_ckpt_path(path, sizeof path, dir, id->group)) != 0) {
		qw_errbuf(err, errlen, "group %s: no usable checkpoint path "
			 "in %s", id->group != NULL ? id->group : "?",
			 dir != NULL ? dir : "?");
		return rc;
	}
	rc = ckpt_read_file(path, &buf, &len);
	if (rc == QW_ENODATA) {
		qw_errbuf(err, errlen, "%s: no checkpoint", path);
		return rc;
	}
	if (rc == QW_EIO || rc == QW_ENOMEM) {
		qw_errbuf(err, errlen, "%s: cannot read: %s", path,
			 rc == QW_EIO ? strerror(errno) : qw_strerror(rc));
		return rc;
	}
	if (rc == 0)
		rc = ckpt_apply(buf, len, id, d, saved_ns);
	free(buf);
	if (rc == 0) {
		qw_errbuf(err, errlen, "%s: restored", path);
		return 0;
	}
	if (qw_ckpt_reject(path, aside, sizeof aside) == 0) {
		qw_errbuf(err, errlen, "%s refused: %s; kept as %s", path,
			 ckpt_why(rc), aside);
	} else {
		e = errno;
		qw_errbuf(err, errlen, "%s refused: %s; could not set it "
			 "aside: %s", path, ckpt_why(rc), strerror(e));
	}
	return rc;
}
