/* keygen.c: `quadwatch keygen [--force] NAME`, a CURVE key pair (see
 * quadwatch-keygen(1)).  Writes NAME.key (public and secret, mode 0600)
 * and NAME.pub (public only, mode 0644) in the format of auth.h; NAME may
 * carry a directory.  Existing files are never replaced without --force
 * (then each is replaced atomically).  Prints the public key.
 * Exit 0 written, 1 could not write (or a file exists), 2 usage.
 * Workload: one key pair per run. */
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>

#include "auth.h"
#include "bus.h"
#include "cmd.h"

#define KEYGEN_SECRET_SUFFIX ".key"

static int keygen_usage(void)
{
	fprintf(stderr, "usage: quadwatch keygen [--force] NAME\n"
		"  writes NAME.key (secret, mode 0600) and NAME.pub\n");
	return QW_EXIT_USAGE;
}

/* NAME.key and NAME.pub; 0, or QW_EXIT_USAGE when too long. */
static int keygen_paths(const char *name, char *sec, char *pub, size_t cap)
{
	if ((size_t)snprintf(sec, cap, "%s%s", name, KEYGEN_SECRET_SUFFIX)
	    >= cap ||
	    (size_t)snprintf(pub, cap, "%s%s", name, QW_AUTH_PUB_SUFFIX)
	    >= cap)
		return QW_EXIT_USAGE;
	return 0;
}

/* Without --force, an existing file stops everything before anything is
 * written, so a half-replaced pair never happens. */
static int keygen_free_paths(const char *sec, const char *pub)
{
	const char *paths[2] = {sec, pub};
	struct stat st;
	size_t i;

	for (i = 0; i < 2; i++)
		if (lstat(paths[i], &st) == 0) {
			fprintf(stderr, "quadwatch keygen: %s exists; not "
				"replaced (--force replaces it)\n", paths[i]);
			return QW_EXIT_FAIL;
		}
	return 0;
}

static int keygen_write(const char *sec, const char *pub,
			const struct qw_auth_key *k, int force)
{
	char err[QW_AUTH_ERR_MAX];

	if (qw_auth_key_write(sec, k, 1, force, err, sizeof err) != 0) {
		fprintf(stderr, "quadwatch keygen: %s\n", err);
		return QW_EXIT_FAIL;
	}
	if (qw_auth_key_write(pub, k, 0, force, err, sizeof err) != 0) {
		fprintf(stderr, "quadwatch keygen: %s\n", err);
		if (!force)
			remove(sec); /* ours, written a moment ago */
		return QW_EXIT_FAIL;
	}
	return 0;
}

int qw_cmd_keygen(int argc, char **argv)
{
	char sec[QW_AUTH_ERR_MAX / 2], pub[QW_AUTH_ERR_MAX / 2];
	char z85[QW_AUTH_Z85_LEN + 1];
	struct qw_auth_key k;
	const char *name = NULL, *stem;
	int i, force = 0, rc;

	for (i = 1; i < argc; i++) {
		if (strcmp(argv[i], "--force") == 0)
			force = 1;
		else if (name == NULL && argv[i][0] != '-' && argv[i][0])
			name = argv[i];
		else
			return keygen_usage();
	}
	if (name == NULL || keygen_paths(name, sec, pub, sizeof sec) != 0)
		return keygen_usage();
	if (!qw_bus_has_curve()) {
		fprintf(stderr, "quadwatch keygen: libzmq has no CURVE "
			"support (built without libsodium)\n");
		return QW_EXIT_FAIL;
	}
	if (!force && (rc = keygen_free_paths(sec, pub)) != 0)
		return rc;
	memset(&k, 0, sizeof k);
	stem = strrchr(name, '/');
	snprintf(k.name, sizeof k.name, "%s", stem != NULL ? stem + 1 : name);
	if (qw_bus_curve_keypair(k.pub, k.sec) != 0) {
		fprintf(stderr, "quadwatch keygen: %s\n", qw_bus_strerror());
		return QW_EXIT_FAIL;
	}
	k.has_secret = 1;
	rc = keygen_write(sec, pub, &k, force);
	if (rc == 0) {
		qw_auth_z85_encode(k.pub, z85);
		printf("%s\n", z85);
		fprintf(stderr, "quadwatch keygen: wrote %s (secret, mode "
			"0600) and %s\n", sec, pub);
	}
	qw_auth_key_clear(&k);
	return rc;
}
