/* input.h: an input file of replay or fit opened once, its kind known.
 *
 * Whether an input is a capture or CSV shows in its first bytes (the
 * capture magic, capture.h).  A regular file is probed and rewound; a
 * pipe, a FIFO, a terminal or standard input cannot be rewound and may
 * be read only once, so the probed bytes are handed back: the stream
 * given out yields every byte of the input, those first. */
#ifndef QW_INPUT_H
#define QW_INPUT_H

#include <stdint.h>
#include <stdio.h>

struct qw_input_peek;

struct qw_input {
	FILE *fp;         /* the whole input, from its first byte */
	const char *name; /* for messages: the path, "(stdin)" for "-" */
	uint64_t size;    /* bytes of a regular file, else 0 */
	int regular;      /* a regular file (it could be read again) */
	int capture;      /* begins with the capture magic */
	struct qw_input_peek *peek; /* the hand-back of a stream, or NULL */
};

/* Opens path ("-" = standard input, which stays open after close) and
 * probes it.  0, or QW_EIO (errno says why), QW_ENOMEM. */
int qw_input_open(const char *path, struct qw_input *in);
/* Closes what qw_input_open opened; in is zeroed. */
void qw_input_close(struct qw_input *in);

/* qw_input_open into an input of its own, for a reader that keeps it
 * (csvin.c, capture.c); qw_input_free (NULL: nothing) closes and frees
 * it.  0, QW_EIO (errno says why), QW_ENOMEM. */
int qw_input_new(const char *path, struct qw_input **out);
void qw_input_free(struct qw_input *in);

/* 1 when path is "-" or not a regular file (it can be read once), 0 when
 * it is one, QW_EIO when it cannot be examined. */
int qw_input_once(const char *path);

#endif
