/* test_input.c: inputs opened once and probed (src/io/input.c).
 *
 * Oracle: the bytes written.  Whatever the input (a regular file, a pipe
 * by its /dev/fd path, standard input), the stream handed out yields
 * every byte written, in order, the probed ones first; the capture magic
 * is recognised only whole; a short input is given back whole; a missing
 * path or a directory is QW_EIO with errno saying which; standard input
 * stays open after close; each allocation failing in turn is a clean
 * error with nothing leaked. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <errno.h>
#include <fcntl.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/wait.h>
#include <unistd.h>

#include "capture.h"
#include "input.h"
#include "quadwatch.h"
#include "qwalloc.h"

#define T_BIG 300000 /* bytes: past a pipe's buffer and stdio's */

/* n bytes of a pattern after the prefix pre (npre bytes). */
static unsigned char *t_bytes(const char *pre, size_t npre, size_t n)
{
	unsigned char *b = malloc(n > 0 ? n : 1);
	size_t i;

	assert_non_null(b);
	for (i = 0; i < n; i++)
		b[i] = i < npre ? (unsigned char)pre[i]
				: (unsigned char)(i * 131 + i / 977);
	return b;
}

/* Reads the whole input and checks it is want (n bytes). */
static void t_read_all(struct qw_input *in, const unsigned char *want,
		       size_t n)
{
	/* static: no allocation here, for the failure sweep */
	static unsigned char got[T_BIG + 16];
	size_t have = 0, r;

	assert_true(n <= T_BIG);
	/* odd chunk sizes, so reads straddle the probed bytes */
	while ((r = fread(got + have, 1, have < 64 ? 3 : 7919,
			  in->fp)) > 0) {
		have += r;
		assert_true(have <= n);
	}
	assert_false(ferror(in->fp));
	assert_int_equal(have, n);
	if (n > 0)
		assert_memory_equal(got, want, n);
}

/* A child writes b (n bytes) into a pipe; returns the read end. */
static int t_pipe(const unsigned char *b, size_t n, pid_t *pid)
{
	int fd[2];

	assert_int_equal(pipe(fd), 0);
	*pid = fork();
	assert_true(*pid >= 0);
	if (*pid == 0) {
		size_t done = 0;

		close(fd[0]);
		while (done < n) {
			/* small writes, so the probe sees short reads */
			size_t k = n - done < 5 ? n - done : done < 12 ? 2
				   : n - done;
			ssize_t w = write(fd[1], b + done, k);

			if (w <= 0)
				_exit(1);
			done += (size_t)w;
		}
		_exit(0);
	}
	close(fd[1]);
	return fd[0];
}

static void t_wait(pid_t pid)
{
	int st;

	assert_int_equal(waitpid(pid, &st, 0), pid);
	assert_true(WIFEXITED(st) && WEXITSTATUS(st) == 0);
}

/* Each content through a pipe by its /dev/fd path: kind and bytes. */
static void test_pipe(void **state)
{
	static const struct {
		const char *pre;
		size_t npre, n;
		int capture;
	} cases[] = {
		{"time,a,b\n", 9, T_BIG, 0},
		{QW_CAPTURE_MAGIC, QW_CAPTURE_MAGIC_LEN, T_BIG, 1},
		{QW_CAPTURE_MAGIC, QW_CAPTURE_MAGIC_LEN, QW_CAPTURE_MAGIC_LEN,
		 1},
		{"QWC", 3, 3, 0},  /* a partial magic: given back whole */
		{"QWCAP2", 6, 100, 0},
		{"", 0, 0, 0},     /* empty */
		{"t", 1, 1, 0},
	};
	size_t i;

	(void)state;
	for (i = 0; i < sizeof cases / sizeof cases[0]; i++) {
		unsigned char *b = t_bytes(cases[i].pre, cases[i].npre,
					   cases[i].n);
		struct qw_input in;
		char path[32];
		pid_t pid;
		int fd = t_pipe(b, cases[i].n, &pid);

		snprintf(path, sizeof path, "/dev/fd/%d", fd);
		assert_int_equal(qw_input_once(path), 1);
		assert_int_equal(qw_input_open(path, &in), 0);
		assert_int_equal(in.capture, cases[i].capture);
		assert_int_equal(in.regular, 0);
		assert_true(in.size == 0);
		assert_string_equal(in.name, path);
		t_read_all(&in, b, cases[i].n);
		qw_input_close(&in);
		assert_null(in.fp);
		close(fd);
		t_wait(pid);
		free(b);
	}
}

/* A regular file: rewound after the probe, its size known. */
static void test_regular(void **state)
{
	char path[] = "/tmp/qw-input-XXXXXX";
	int fd = mkstemp(path), k;

	(void)state;
	assert_true(fd >= 0);
	close(fd);
	for (k = 0; k < 2; k++) {
		unsigned char *b = t_bytes(k ? QW_CAPTURE_MAGIC : "time,x\n",
					   k ? QW_CAPTURE_MAGIC_LEN : 7, T_BIG);
		struct qw_input in;
		FILE *f = fopen(path, "wb");

		assert_non_null(f);
		assert_int_equal(fwrite(b, 1, T_BIG, f), T_BIG);
		assert_int_equal(fclose(f), 0);
		assert_int_equal(qw_input_once(path), 0);
		assert_int_equal(qw_input_open(path, &in), 0);
		assert_int_equal(in.capture, k);
		assert_int_equal(in.regular, 1);
		assert_true(in.size == T_BIG);
		t_read_all(&in, b, T_BIG);
		qw_input_close(&in);
		free(b);
	}
	unlink(path);
}

/* "-": standard input, which stays open after close. */
static void test_stdin(void **state)
{
	unsigned char *b = t_bytes("time,s\n", 7, T_BIG);
	struct qw_input in;
	int saved = dup(STDIN_FILENO), fd;
	pid_t pid;

	(void)state;
	assert_true(saved >= 0);
	fd = t_pipe(b, T_BIG, &pid);
	assert_int_equal(dup2(fd, STDIN_FILENO), STDIN_FILENO);
	close(fd);
	assert_int_equal(qw_input_once("-"), 1);
	assert_int_equal(qw_input_open("-", &in), 0);
	assert_string_equal(in.name, "(stdin)");
	assert_int_equal(in.capture, 0);
	t_read_all(&in, b, T_BIG);
	qw_input_close(&in);
	assert_true(fcntl(STDIN_FILENO, F_GETFD) >= 0);
	assert_int_equal(dup2(saved, STDIN_FILENO), STDIN_FILENO);
	close(saved);
	t_wait(pid);
	free(b);
}

static void test_refused(void **state)
{
	struct qw_input in;

	(void)state;
	assert_int_equal(qw_input_open("/nonexistent/in.csv", &in), QW_EIO);
	assert_int_equal(errno, ENOENT);
	assert_null(in.fp);
	assert_int_equal(qw_input_open("/tmp", &in), QW_EIO);
	assert_int_equal(errno, EISDIR);
	assert_null(in.fp);
	assert_int_equal(qw_input_once("/nonexistent/in.csv"), QW_EIO);
}

/* The lowest free descriptor: the same before and after when none leaks. */
static int t_free_fd(void)
{
	int fd = dup(STDIN_FILENO);

	assert_true(fd >= 0);
	close(fd);
	return fd;
}

/* Each allocation of an open (regular file, then pipe) fails in turn: a
 * clean QW_ENOMEM or QW_EIO, or the whole input; nothing leaks, no
 * descriptor stays open. */
static void test_allocation_failures(void **state)
{
	char path[] = "/tmp/qw-input-XXXXXX";
	unsigned char *b;
	int fd, pipe_in, low;
	long k, n[2] = {0, 0};

	(void)state;
	if (!QWA_ACTIVE)
		skip();
	b = t_bytes("time,x\n", 7, 5000);
	fd = mkstemp(path);
	assert_true(fd >= 0);
	assert_int_equal(write(fd, b, 5000), 5000);
	close(fd);
	low = t_free_fd();
	for (pipe_in = 0; pipe_in < 2; pipe_in++) {
		for (k = 0;; k++) {
			struct qw_input in;
			char fdpath[32];
			pid_t pid = 0;
			int rc, rd = -1;

			if (pipe_in) {
				rd = t_pipe(b, 5000, &pid);
				snprintf(fdpath, sizeof fdpath, "/dev/fd/%d", rd);
			}
			qwa_start(k);
			rc = qw_input_open(pipe_in ? fdpath : path, &in);
			if (rc == 0) {
				t_read_all(&in, b, 5000);
				qw_input_close(&in);
			}
			qwa_stop();
			if (pipe_in) {
				/* what a failed open left unread, so that the
				 * writer ends well (not on a closed pipe) */
				char sink[512];

				while (read(rd, sink, sizeof sink) > 0)
					;
				close(rd);
				t_wait(pid);
			}
			assert_int_equal(qwa.live, 0);
			assert_int_equal(t_free_fd(), low);
			if (!qwa_injected()) {
				assert_int_equal(rc, 0);
				break;
			}
			assert_true(rc == 0 || rc == QW_ENOMEM || rc == QW_EIO);
		}
		n[pipe_in] = k;
	}
	unlink(path);
	free(b);
	printf("# input: %ld allocations (file), %ld (pipe), each failed in "
	       "turn\n", n[0], n[1]);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(test_pipe),
		cmocka_unit_test(test_regular),
		cmocka_unit_test(test_stdin),
		cmocka_unit_test(test_refused),
		cmocka_unit_test(test_allocation_failures),
	};

	return cmocka_run_group_tests(tests, NULL, NULL);
}
