/* auth.c: CURVE key files, the allowed-clients directory and the ZAP
 * decision (see auth.h).
 *
 * Z85 is coded here from RFC 32 (base 85, four bytes big-endian to five
 * characters) so this file needs no libzmq; bus.c derives and makes keys.
 * The ZAP decision is in auth_zap.c.
 *
 * Workload: key files are read at start and on reload (a handful, or a
 * few thousand clients at most); one ZAP request per connection attempt,
 * answered by a binary search of the sorted allowed keys. */
#include "auth.h"

#include <dirent.h>
#include <errno.h>
#include <fcntl.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "config.h"
#include "log.h"
#include "quadwatch.h"

struct qw_auth {
	struct qw_auth_key *keys; /* n, sorted by pub (memcmp) */
	size_t n;
};

/* RFC 32's alphabet, in value order. */
static const char z85_chars[] =
	"0123456789abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ"
	".-:+=^!/*?&<>()[]{}@%$#";
#define Z85_BASE 85u
#define Z85_GROUP 5  /* characters per four bytes */

void qw_auth_z85_encode(const unsigned char key[QW_BUS_KEY_BYTES],
			char out[QW_AUTH_Z85_LEN + 1])
{
	size_t i, j, o = 0;

	for (i = 0; i < QW_BUS_KEY_BYTES; i += 4) {
		uint32_t v = (uint32_t)key[i] << 24 |
			     (uint32_t)key[i + 1] << 16 |
			     (uint32_t)key[i + 2] << 8 | key[i + 3];

		for (j = Z85_GROUP; j-- > 0;) {
			out[o + j] = z85_chars[v % Z85_BASE];
			v /= Z85_BASE;
		}
		o += Z85_GROUP;
	}
	out[o] = '\0';
}

static int z85_value(char c)
{
	const char *p = c != '\0' ? strchr(z85_chars, c) : NULL;

	return p != NULL ? (int)(p - z85_chars) : -1;
}

int qw_auth_z85_decode(const char *s, size_t len,
		       unsigned char key[QW_BUS_KEY_BYTES])
{
	size_t i, j, o = 0;

	if (len != QW_AUTH_Z85_LEN)
		return QW_ERROR(QW_EFORMAT);
	for (i = 0; i < len; i += Z85_GROUP) {
		uint64_t v = 0;

		for (j = 0; j < Z85_GROUP; j++) {
			int d = z85_value(s[i + j]);

			if (d < 0)
				return QW_ERROR(QW_EFORMAT);
			v = v * Z85_BASE + (uint64_t)d;
		}
		if (v > UINT32_MAX) /* "#####" and the like: not a group */
			return QW_ERROR(QW_EFORMAT);
		key[o++] = (unsigned char)(v >> 24);
		key[o++] = (unsigned char)(v >> 16);
		key[o++] = (unsigned char)(v >> 8);
		key[o++] = (unsigned char)v;
	}
	return 0;
}

/* One "name = value" line, blanks trimmed; 0 for blank or comment lines,
 * 1 with the parts, -1 without '='. */
static int auth_line(const char *a, const char *end, const char **k,
		     size_t *klen, const char **v, size_t *vlen)
{
	const char *eq;

	while (a < end && (*a == ' ' || *a == '\t'))
		a++;
	while (end > a && (end[-1] == ' ' || end[-1] == '\t' ||
			   end[-1] == '\r'))
		end--;
	if (a == end || *a == '#')
		return 0;
	eq = memchr(a, '=', (size_t)(end - a));
	if (eq == NULL)
		return -1;
	*k = a;
	*v = eq + 1;
	while (eq > a && (eq[-1] == ' ' || eq[-1] == '\t'))
		eq--;
	*klen = (size_t)(eq - a);
	while (*v < end && (**v == ' ' || **v == '\t'))
		(*v)++;
	*vlen = (size_t)(end - *v);
	return 1;
}

int qw_auth_key_parse(const char *text, size_t len, const char *name,
		      struct qw_auth_key *k, char *err, size_t errlen)
{
	const char *p = text, *end = text + len, *key, *val;
	size_t klen, vlen;
	int line = 0, have_pub = 0, r;

	memset(k, 0, sizeof *k);
	while (p < end) {
		const char *nl = memchr(p, '\n', (size_t)(end - p));
		const char *eol = nl != NULL ? nl : end;
		unsigned char *dst;
		int *have;

		line++;
		r = auth_line(p, eol, &key, &klen, &val, &vlen);
		p = nl != NULL ? nl + 1 : end;
		if (r == 0)
			continue;
		if (r < 0) {
			qw_errbuf(err, errlen, "%s:%d: expected 'public = KEY' "
				 "or 'secret = KEY'", name, line);
			goto fail;
		}
		if (klen == 6 && memcmp(key, "public", 6) == 0) {
			dst = k->pub;
			have = &have_pub;
		} else if (klen == 6 && memcmp(key, "secret", 6) == 0) {
			dst = k->sec;
			have = &k->has_secret;
		} else {
			qw_errbuf(err, errlen, "%s:%d: unknown key '%.*s' "
				 "(public or secret)", name, line,
				 (int)(klen < 32 ? klen : 32), key);
			goto fail;
		}
		if (*have) {
			qw_errbuf(err, errlen, "%s:%d: '%.*s' given twice",
				 name, line, (int)klen, key);
			goto fail;
		}
		if (memchr(val, '\0', vlen) != NULL ||
		    qw_auth_z85_decode(val, vlen, dst) != 0) {
			qw_errbuf(err, errlen, "%s:%d: %.*s: expected %d Z85 "
				 "characters", name, line, (int)klen, key,
				 QW_AUTH_Z85_LEN);
			goto fail;
		}
		*have = 1;
	}
	if (!have_pub) {
		qw_errbuf(err, errlen, "%s: no 'public = KEY' line", name);
		goto fail;
	}
	return 0;
fail:
	qw_auth_key_clear(k);
	return QW_ERROR(QW_EFORMAT);
}

/* The stem of path's last component (".../op1.pub" -> "op1"). */
static void auth_stem(const char *path, char *name, size_t cap)
{
	const char *b = strrchr(path, '/');
	size_t n;

	b = b != NULL ? b + 1 : path;
	n = strcspn(b, ".");
	if (n == 0)
		n = strlen(b);
	snprintf(name, cap, "%.*s", (int)(n < cap ? n : cap - 1), b);
}

/* Reads at most QW_AUTH_FILE_MAX bytes of a regular file into buf,
 * checking the mode when secret.  0 or QW_EIO/QW_EFORMAT with err. */
static int auth_read(const char *path, int secret, char *buf, size_t *len,
		     char *err, size_t errlen)
{
	struct stat st;
	ssize_t n;
	int fd = open(path, O_RDONLY | O_CLOEXEC | O_NOCTTY), rc = 0;

	if (fd < 0) {
		qw_errbuf(err, errlen, "%s: %s", path, strerror(errno));
		return QW_ERROR(QW_EFORMAT);
	}
	if (fstat(fd, &st) != 0 || !S_ISREG(st.st_mode)) {
		qw_errbuf(err, errlen, "%s: not a regular file", path);
		rc = QW_ERROR(QW_EFORMAT);
	} else if (secret && (st.st_mode & 077) != 0) {
		qw_errbuf(err, errlen, "%s: secret key file is open to group "
			 "or others (mode %04o); refusing it: chmod 600 %s",
			 path, (unsigned)(st.st_mode & 07777), path);
		rc = QW_ERROR(QW_EFORMAT);
	} else if (st.st_size > QW_AUTH_FILE_MAX) {
		qw_errbuf(err, errlen, "%s: %lld bytes, a key file has at most "
			 "%d", path, (long long)st.st_size, QW_AUTH_FILE_MAX);
		rc = QW_ERROR(QW_EFORMAT);
	} else if ((n = read(fd, buf, QW_AUTH_FILE_MAX)) < 0) {
		qw_errbuf(err, errlen, "%s: %s", path, strerror(errno));
		rc = QW_ERROR(QW_EIO);
	} else {
		*len = (size_t)n;
	}
	close(fd);
	return rc;
}

int qw_auth_key_load(const char *path, int need_secret,
		     struct qw_auth_key *k, char *err, size_t errlen)
{
	char buf[QW_AUTH_FILE_MAX];
	unsigned char pub[QW_BUS_KEY_BYTES];
	size_t len = 0;
	int rc;

	memset(k, 0, sizeof *k);
	rc = auth_read(path, need_secret, buf, &len, err, errlen);
	if (rc == 0)
		rc = qw_auth_key_parse(buf, len, path, k, err, errlen);
	explicit_bzero(buf, sizeof buf);
	if (rc != 0)
		return rc;
	auth_stem(path, k->name, sizeof k->name);
	if (need_secret && !k->has_secret) {
		qw_errbuf(err, errlen, "%s: no 'secret = KEY' line (a public "
			 "key file where a secret one was expected)", path);
		rc = QW_ERROR(QW_EFORMAT);
	} else if (!need_secret && k->has_secret) {
		qw_errbuf(err, errlen, "%s: holds a secret key; give the public "
			 "file (NAME.pub) here", path);
		rc = QW_ERROR(QW_EFORMAT);
	} else if (need_secret && (qw_bus_curve_public(k->sec, pub) != 0 ||
				   memcmp(pub, k->pub, sizeof pub) != 0)) {
		qw_errbuf(err, errlen, "%s: the public key is not the one of "
			 "the secret key", path);
		rc = QW_ERROR(QW_EFORMAT);
	}
	if (rc != 0)
		qw_auth_key_clear(k);
	return rc;
}

void qw_auth_key_clear(struct qw_auth_key *k)
{
	explicit_bzero(k->sec, sizeof k->sec);
	k->has_secret = 0;
}

#define AUTH_MODE_SECRET 0600 /* owner reads and writes; nobody else */
#define AUTH_MODE_PUBLIC 0644 /* anyone may read a public key */

/* The text of a key file; its length, or 0 when cap is too small. */
static size_t auth_format(const struct qw_auth_key *k, int secret, char *buf,
			  size_t cap)
{
	char zp[QW_AUTH_Z85_LEN + 1], zs[QW_AUTH_Z85_LEN + 1];
	int n;

	qw_auth_z85_encode(k->pub, zp);
	if (secret) {
		qw_auth_z85_encode(k->sec, zs);
		n = snprintf(buf, cap, "# quadwatch CURVE secret key \"%s\" "
			     "(quadwatch-keygen(1)).\n# Keep it private: "
			     "mode 0600, its owner only.\npublic = %s\n"
			     "secret = %s\n", k->name, zp, zs);
		explicit_bzero(zs, sizeof zs);
	} else {
		n = snprintf(buf, cap, "# quadwatch CURVE public key \"%s\" "
			     "(quadwatch-keygen(1)).\n# Give it to the peers "
			     "that must know this key.\npublic = %s\n",
			     k->name, zp);
	}
	return n > 0 && (size_t)n < cap ? (size_t)n : 0;
}

/* Writes len bytes to a new temporary file beside path, in tmp. */
static int auth_tmp_write(const char *path, const char *text, size_t len,
			  mode_t mode, char *tmp, size_t tcap)
{
	int fd, ok;

	if ((size_t)snprintf(tmp, tcap, "%s.tmpXXXXXX", path) >= tcap) {
		errno = ENAMETOOLONG;
		return -1;
	}
	fd = mkstemp(tmp);
	if (fd < 0)
		return -1;
	ok = fchmod(fd, mode) == 0 && write(fd, text, len) == (ssize_t)len &&
	     fsync(fd) == 0;
	if (close(fd) != 0)
		ok = 0;
	if (!ok) {
		int e = errno;

		unlink(tmp);
		errno = e;
		return -1;
	}
	return 0;
}

int qw_auth_key_write(const char *path, const struct qw_auth_key *k,
		      int secret, int force, char *err, size_t errlen)
{
	char text[QW_AUTH_FILE_MAX], tmp[QW_AUTH_ERR_MAX];
	size_t len = auth_format(k, secret, text, sizeof text);
	int rc = 0;

	if (len == 0) {
		qw_errbuf(err, errlen, "%s: key name too long", path);
		return QW_ERROR(QW_EINVAL);
	}
	if (auth_tmp_write(path, text, len, secret ? AUTH_MODE_SECRET
			   : AUTH_MODE_PUBLIC, tmp, sizeof tmp) != 0) {
		qw_errbuf(err, errlen, "%s: %s", path, strerror(errno));
		rc = QW_ERROR(QW_EIO);
	} else if (force ? rename(tmp, path) != 0 : link(tmp, path) != 0) {
		/* link, not rename: it fails when path exists, atomically */
		if (errno == EEXIST)
			qw_errbuf(err, errlen, "%s exists; not replaced (--force "
				 "replaces it)", path);
		else
			qw_errbuf(err, errlen, "%s: %s", path, strerror(errno));
		unlink(tmp);
		rc = QW_ERROR(QW_EIO);
	} else if (!force) {
		unlink(tmp);
	}
	explicit_bzero(text, sizeof text);
	return rc;
}

int qw_auth_client(const char *key, const char *server_pub,
		   struct qw_bus_curve *c, char *err, size_t errlen)
{
	struct qw_auth_key k;
	int rc;

	memset(c, 0, sizeof *c);
	if (!qw_bus_has_curve()) {
		qw_errbuf(err, errlen, "this libzmq has no CURVE support");
		return QW_ERROR(QW_EIO);
	}
	if ((rc = qw_auth_key_load(server_pub, 0, &k, err, errlen)) != 0)
		return rc;
	memcpy(c->server_key, k.pub, QW_BUS_KEY_BYTES);
	if (key == NULL) {
		if (qw_bus_curve_keypair(c->public_key, c->secret_key) != 0) {
			qw_errbuf(err, errlen, "no session key pair: %s",
				 qw_bus_strerror());
			return QW_ERROR(QW_EIO);
		}
		return 0;
	}
	if ((rc = qw_auth_key_load(key, 1, &k, err, errlen)) != 0)
		return rc;
	memcpy(c->public_key, k.pub, QW_BUS_KEY_BYTES);
	memcpy(c->secret_key, k.sec, QW_BUS_KEY_BYTES);
	qw_auth_key_clear(&k);
	return 0;
}

int qw_auth_endpoint(const char *key, const char *server_pub, int bind,
		     struct qw_bus_curve *c, char *err, size_t errlen)
{
	struct qw_auth_key k;
	int rc;

	if (!bind)
		return qw_auth_client(key, server_pub, c, err, errlen);
	memset(c, 0, sizeof *c);
	if (key == NULL || server_pub != NULL) {
		qw_errbuf(err, errlen, "a bound socket is a CURVE server: it "
			 "takes --key (its own secret key), not --server-key");
		return QW_ERROR(QW_EINVAL);
	}
	if (!qw_bus_has_curve()) {
		qw_errbuf(err, errlen, "this libzmq has no CURVE support");
		return QW_ERROR(QW_EIO);
	}
	if ((rc = qw_auth_key_load(key, 1, &k, err, errlen)) != 0)
		return rc;
	c->server = 1;
	memcpy(c->public_key, k.pub, QW_BUS_KEY_BYTES);
	memcpy(c->secret_key, k.sec, QW_BUS_KEY_BYTES);
	qw_auth_key_clear(&k);
	return 0;
}

/* ---- the allowed clients ------------------------------------------------ */

static int auth_cmp(const void *a, const void *b)
{
	return memcmp(((const struct qw_auth_key *)a)->pub,
		      ((const struct qw_auth_key *)b)->pub, QW_BUS_KEY_BYTES);
}

/* 1 when name is an allowed-clients entry: NAME.pub, not hidden. */
static int auth_is_pub(const char *name)
{
	size_t n = strlen(name), s = strlen(QW_AUTH_PUB_SUFFIX);

	return name[0] != '.' && n > s &&
	       strcmp(name + n - s, QW_AUTH_PUB_SUFFIX) == 0;
}

/* Loads the .pub files of d into a (sized to QW_AUTH_MAX_KEYS). */
static int auth_scan(DIR *d, const char *dir, qw_auth *a, char *err,
		     size_t errlen)
{
	char path[QW_AUTH_ERR_MAX / 2];
	struct dirent *e;
	int rc;

	while ((errno = 0, e = readdir(d)) != NULL) {
		if (!auth_is_pub(e->d_name))
			continue;
		if (a->n == QW_AUTH_MAX_KEYS) {
			qw_errbuf(err, errlen, "%s: more than %d keys", dir,
				 QW_AUTH_MAX_KEYS);
			return QW_ERROR(QW_EFORMAT);
		}
		if ((size_t)snprintf(path, sizeof path, "%s/%s", dir,
				     e->d_name) >= sizeof path) {
			qw_errbuf(err, errlen, "%s/%s: path too long", dir,
				 e->d_name);
			return QW_ERROR(QW_EFORMAT);
		}
		rc = qw_auth_key_load(path, 0, &a->keys[a->n], err, errlen);
		if (rc != 0)
			return rc;
		a->n++;
	}
	if (errno != 0) {
		qw_errbuf(err, errlen, "%s: %s", dir, strerror(errno));
		return QW_ERROR(QW_EIO);
	}
	return 0;
}

int qw_auth_load(const char *dir, qw_auth **out, char *err, size_t errlen)
{
	qw_auth *a;
	DIR *d;
	int rc;

	*out = NULL;
	a = calloc(1, sizeof *a);
	if (a == NULL || (a->keys = calloc(QW_AUTH_MAX_KEYS,
					   sizeof *a->keys)) == NULL) {
		free(a);
		qw_errbuf(err, errlen, "%s: out of memory", dir);
		return QW_ERROR(QW_ENOMEM);
	}
	d = opendir(dir);
	if (d == NULL) {
		qw_errbuf(err, errlen, "%s: %s", dir, strerror(errno));
		qw_auth_free(a);
		return QW_ERROR(QW_EFORMAT);
	}
	rc = auth_scan(d, dir, a, err, errlen);
	closedir(d);
	if (rc != 0) {
		qw_auth_free(a);
		return rc;
	}
	qsort(a->keys, a->n, sizeof *a->keys, auth_cmp);
	*out = a;
	return 0;
}

void qw_auth_free(qw_auth *a)
{
	if (a == NULL)
		return;
	free(a->keys);
	free(a);
}

size_t qw_auth_count(const qw_auth *a)
{
	return a != NULL ? a->n : 0;
}

const struct qw_auth_key *qw_auth_find(const qw_auth *a,
				       const unsigned char *pub)
{
	struct qw_auth_key probe;

	if (a == NULL || a->n == 0)
		return NULL;
	memcpy(probe.pub, pub, QW_BUS_KEY_BYTES);
	return bsearch(&probe, a->keys, a->n, sizeof *a->keys, auth_cmp);
}

/* ---- a configuration's keys ---------------------------------------------- */

int qw_auth_setup_load(const struct qw_config *cfg, struct qw_auth_setup *sec,
		       char *err, size_t errlen)
{
	struct qw_auth_key own, peer;
	int rc;

	memset(sec, 0, sizeof *sec);
	if (cfg->server_key[0] == '\0') {
		if (cfg->client_keys[0] == '\0' && cfg->publisher_key[0] == '\0')
			return 0;
		snprintf(err, errlen, "%s: [security] %s needs server_key "
			 "(this daemon's key pair)", cfg->path,
			 cfg->client_keys[0] ? "client_keys" : "publisher_key");
		return QW_ERROR(QW_EFORMAT);
	}
	if (!qw_bus_has_curve()) {
		snprintf(err, errlen, "%s: [security] server_key: this libzmq "
			 "has no CURVE support", cfg->path);
		return QW_ERROR(QW_EFORMAT);
	}
	if ((rc = qw_auth_key_load(cfg->server_key, 1, &own, err, errlen)))
		return rc;
	sec->on = 1;
	sec->server.server = 1;
	memcpy(sec->server.public_key, own.pub, QW_BUS_KEY_BYTES);
	memcpy(sec->server.secret_key, own.sec, QW_BUS_KEY_BYTES);
	qw_auth_key_clear(&own);
	if (cfg->publisher_key[0] != '\0') {
		rc = qw_auth_key_load(cfg->publisher_key, 0, &peer, err, errlen);
		if (rc != 0)
			return rc;
		sec->has_client = 1;
		sec->client = sec->server;
		sec->client.server = 0;
		memcpy(sec->client.server_key, peer.pub, QW_BUS_KEY_BYTES);
	}
	if (cfg->client_keys[0] != '\0')
		return qw_auth_load(cfg->client_keys, &sec->allowed, err,
				    errlen);
	return 0;
}

void qw_auth_setup_free(struct qw_auth_setup *s)
{
	qw_auth_free(s->allowed);
	explicit_bzero(s, sizeof *s);
}
