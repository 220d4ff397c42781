/* input.c: an input opened once, its first bytes probed (see input.h).
 *
 * The probe reads the magic with read(2) on the file descriptor, before
 * any stdio buffer exists.  A regular file is then rewound (lseek) and
 * read through fdopen.  Anything else is read through fopencookie (a GNU
 * stdio extension): the cookie's read gives the probed bytes back first,
 * then reads the descriptor itself, so every byte passes through one
 * stdio buffer only, as through fdopen.
 *
 * Workload: once per input file. */
#define _GNU_SOURCE /* fopencookie */
#include "input.h"

#include <errno.h>
#include <fcntl.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "capture.h"
#include "quadwatch.h"

struct qw_input_peek {
	int fd;
	unsigned char pre[QW_CAPTURE_MAGIC_LEN];
	size_t npre, at;      /* bytes probed, bytes given back */
};

/* Reads up to n bytes, retrying short reads and EINTR: the count read
 * (short only at the end), or -1 with errno. */
static ssize_t input_read_full(int fd, unsigned char *buf, size_t n)
{
	size_t got = 0;

	while (got < n) {
		ssize_t r = read(fd, buf + got, n - got);

		if (r < 0 && errno == EINTR)
			continue;
		if (r < 0)
			return -1;
		if (r == 0)
			break;
		got += (size_t)r;
	}
	return (ssize_t)got;
}

static ssize_t peek_read(void *cookie, char *buf, size_t size)
{
	struct qw_input_peek *pk = cookie;
	ssize_t r;

	if (pk->at < pk->npre) {
		size_t n = pk->npre - pk->at;

		if (n > size)
			n = size;
		memcpy(buf, pk->pre + pk->at, n);
		pk->at += n;
		return (ssize_t)n;
	}
	do
		r = read(pk->fd, buf, size);
	while (r < 0 && errno == EINTR);
	return r;
}

static int peek_close(void *cookie)
{
	struct qw_input_peek *pk = cookie;
	int rc = close(pk->fd);

	free(pk);
	return rc;
}

int qw_input_open(const char *path, struct qw_input *in)
{
	static const cookie_io_functions_t io = {
		.read = peek_read, .close = peek_close,
	};
	unsigned char pre[QW_CAPTURE_MAGIC_LEN];
	struct stat st;
	ssize_t n;
	int fd, saved;

	memset(in, 0, sizeof *in);
	in->name = strcmp(path, "-") == 0 ? "(stdin)" : path;
	/* standard input is duplicated, so that closing the input leaves
	 * descriptor 0 open */
	fd = strcmp(path, "-") == 0 ? fcntl(STDIN_FILENO, F_DUPFD_CLOEXEC, 0)
				    : open(path, O_RDONLY | O_CLOEXEC);
	if (fd < 0)
		return QW_ERROR(QW_EIO);
	if (fstat(fd, &st) != 0)
		goto fail;
	if (S_ISDIR(st.st_mode)) {
		errno = EISDIR;
		goto fail;
	}
	n = input_read_full(fd, pre, sizeof pre);
	if (n < 0)
		goto fail;
	in->capture = qw_capture_detect(pre, (size_t)n);
	in->regular = S_ISREG(st.st_mode);
	if (in->regular) {
		in->size = (uint64_t)st.st_size;
		if (lseek(fd, 0, SEEK_SET) != 0)
			goto fail;
		in->fp = fdopen(fd, "rb");
		if (in->fp == NULL)
			goto fail;
		return 0;
	}
	in->peek = calloc(1, sizeof *in->peek);
	if (in->peek == NULL) {
		close(fd);
		return QW_ERROR(QW_ENOMEM);
	}
	in->peek->fd = fd;
	memcpy(in->peek->pre, pre, (size_t)n);
	in->peek->npre = (size_t)n;
	in->fp = fopencookie(in->peek, "rb", io);
	if (in->fp == NULL) {
		free(in->peek);
		in->peek = NULL;
		goto fail;
	}
	return 0;
fail:
	saved = errno;
	close(fd);
	errno = saved;
	return QW_ERROR(QW_EIO);
}

void qw_input_close(struct qw_input *in)
{
	if (in->fp != NULL)
		fclose(in->fp); /* a stream's cookie goes with it */
	memset(in, 0, sizeof *in);
}

int qw_input_new(const char *path, struct qw_input **out)
{
	struct qw_input *in = malloc(sizeof *in);
	int rc;

	*out = NULL;
	if (in == NULL)
		return QW_ERROR(QW_ENOMEM);
	rc = qw_input_open(path, in);
	if (rc != 0) {
		free(in);
		return rc;
	}
	*out = in;
	return 0;
}

void qw_input_free(struct qw_input *in)
{
	if (in == NULL)
		return;
	qw_input_close(in);
	free(in);
}

int qw_input_once(const char *path)
{
	struct stat st;

	if (strcmp(path, "-") == 0)
		return 1;
	if (stat(path, &st) != 0)
		return QW_ERROR(QW_EIO);
	return !S_ISREG(st.st_mode);
}
