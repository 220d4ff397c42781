/* test_auth.c: CURVE key files, the allowed-clients directory and the ZAP
 * decision (src/io/auth.c).
 *
 * Oracles: RFC 32's published Z85 example ("HelloWorld" for
 * 86 4F D2 6F B5 59 F7 5B) and the CURVE test key pairs printed in
 * libzmq's zmq_curve(7) page (the secret derives the public); a round
 * trip key -> file -> key; every parse and load error provoked, with the
 * file and line named; the mode check at 0644, 0640, 0604 and 0600; RFC 27
 * replies checked frame by frame. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "auth.h"
#include "bus.h"
#include "quadwatch.h"

/* zmq_curve(7): the example server and client key pairs. */
static const char srv_pub[] = "rq:rM>}U?@Lns47E1%kR.o@n%FcmmsL/@{H8]yf7";
static const char srv_sec[] = "JTKVSB%%)wK0E.X)V>+}o?pNmC{O&4W4b!Ni{Lh6";
static const char cli_pub[] = "Yne@$w-vo<fVvi]a<NY6T1ed:M$fCG*[IaLV{hID";
static const char cli_sec[] = "D:)Q[IlAW!ahhC2ac:9*A}h:p?([4%wOTJ%JR%cs";

struct fx {
	char dir[64];
	char err[QW_AUTH_ERR_MAX];
};

static int setup(void **state)
{
	struct fx *f = calloc(1, sizeof *f);

	if (f == NULL)
		return -1;
	snprintf(f->dir, sizeof f->dir, "/tmp/qwauth.XXXXXX");
	if (mkdtemp(f->dir) == NULL) {
		free(f);
		return -1;
	}
	*state = f;
	return 0;
}

static int teardown(void **state)
{
	struct fx *f = *state;
	char path[128];

	/* test files only: a handful of names under f->dir */
	static const char *const names[] = {
		"a.key", "a.pub", "s.key", "p.pub", "c", "c/one.pub",
		"c/two.pub", "c/.hidden.pub", "c/notes.txt", "c/bad.pub",
		"big.key", "w.key", "w.pub"};
	size_t i;

	for (i = sizeof names / sizeof names[0]; i-- > 0;) {
		snprintf(path, sizeof path, "%s/%s", f->dir, names[i]);
		(void)remove(path); /* many are absent in a given test */
	}
	rmdir(f->dir);
	free(f);
	return 0;
}

static void put(const struct fx *f, const char *name, const char *text,
		mode_t mode)
{
	char path[128];
	FILE *fp;

	snprintf(path, sizeof path, "%s/%s", f->dir, name);
	fp = fopen(path, "w");
	assert_non_null(fp);
	fputs(text, fp);
	fclose(fp);
	assert_int_equal(chmod(path, mode), 0);
}

static void path_of(const struct fx *f, const char *name, char *out)
{
	snprintf(out, 128, "%s/%s", f->dir, name);
}

/* ---- Z85 ----------------------------------------------------------------- */

static void test_z85_rfc32(void **state)
{
	unsigned char k[QW_BUS_KEY_BYTES] = {0x86, 0x4F, 0xD2, 0x6F,
					     0xB5, 0x59, 0xF7, 0x5B};
	unsigned char back[QW_BUS_KEY_BYTES];
	char z[QW_AUTH_Z85_LEN + 1];

	(void)state;
	qw_auth_z85_encode(k, z);
	assert_string_equal(z, "HelloWorld" "0000000000" "0000000000"
			       "0000000000");
	assert_int_equal(qw_auth_z85_decode(z, strlen(z), back), 0);
	assert_memory_equal(k, back, sizeof k);
}

static void test_z85_keys(void **state)
{
	unsigned char sec[QW_BUS_KEY_BYTES], pub[QW_BUS_KEY_BYTES];
	unsigned char want[QW_BUS_KEY_BYTES];
	char z[QW_AUTH_Z85_LEN + 1];

	(void)state;
	assert_int_equal(qw_auth_z85_decode(srv_sec, 40, sec), 0);
	assert_int_equal(qw_auth_z85_decode(srv_pub, 40, want), 0);
	assert_int_equal(qw_bus_curve_public(sec, pub), 0);
	assert_memory_equal(pub, want, sizeof pub);
	qw_auth_z85_encode(pub, z);
	assert_string_equal(z, srv_pub);
	assert_int_equal(qw_auth_z85_decode(cli_sec, 40, sec), 0);
	assert_int_equal(qw_bus_curve_public(sec, pub), 0);
	qw_auth_z85_encode(pub, z);
	assert_string_equal(z, cli_pub);
}

static void test_z85_errors(void **state)
{
	unsigned char k[QW_BUS_KEY_BYTES];
	char bad[QW_AUTH_Z85_LEN + 1];

	(void)state;
	assert_int_equal(qw_auth_z85_decode(srv_pub, 39, k), QW_EFORMAT);
	assert_int_equal(qw_auth_z85_decode(srv_pub, 0, k), QW_EFORMAT);
	memcpy(bad, srv_pub, sizeof bad);
	bad[17] = '"'; /* not in the alphabet */
	assert_int_equal(qw_auth_z85_decode(bad, 40, k), QW_EFORMAT);
	bad[17] = '~';
	assert_int_equal(qw_auth_z85_decode(bad, 40, k), QW_EFORMAT);
	bad[17] = '\0';
	assert_int_equal(qw_auth_z85_decode(bad, 40, k), QW_EFORMAT);
	memcpy(bad, srv_pub, sizeof bad);
	memcpy(bad + 35, "#####", 5); /* 85^5 - 1 > 2^32 - 1 */
	assert_int_equal(qw_auth_z85_decode(bad, 40, k), QW_EFORMAT);
	memcpy(bad + 35, "%nSc0", 5); /* 2^32 - 1: the largest group */
	assert_int_equal(qw_auth_z85_decode(bad, 40, k), 0);
	assert_memory_equal(k + 28, "\xff\xff\xff\xff", 4);
}

/* ---- parsing -------------------------------------------------------------- */

static void test_parse_good(void **state)
{
	struct qw_auth_key k;
	char text[256];
	unsigned char want[QW_BUS_KEY_BYTES];

	(void)state;
	snprintf(text, sizeof text, "# a comment\r\n\n  public =  %s \r\n"
		 "\tsecret=%s", srv_pub, srv_sec);
	assert_int_equal(qw_auth_key_parse(text, strlen(text), "t", &k, NULL,
					   0), 0);
	assert_true(k.has_secret);
	qw_auth_z85_decode(srv_pub, 40, want);
	assert_memory_equal(k.pub, want, sizeof want);
	qw_auth_z85_decode(srv_sec, 40, want);
	assert_memory_equal(k.sec, want, sizeof want);
	qw_auth_key_clear(&k);
	assert_false(k.has_secret);
	assert_memory_equal(k.sec, (unsigned char[QW_BUS_KEY_BYTES]){0},
			    QW_BUS_KEY_BYTES);
}

static void parse_fails(const char *text, const char *msg)
{
	struct qw_auth_key k;
	char err[QW_AUTH_ERR_MAX] = "";

	assert_int_equal(qw_auth_key_parse(text, strlen(text), "f.key", &k,
					   err, sizeof err), QW_EFORMAT);
	if (strstr(err, msg) == NULL)
		fail_msg("'%s' lacks '%s'", err, msg);
	assert_false(k.has_secret);
}

static void test_parse_errors(void **state)
{
	char t[256];

	(void)state;
	parse_fails("", "f.key: no 'public = KEY' line");
	parse_fails("# only a comment\n", "no 'public = KEY'");
	snprintf(t, sizeof t, "secret = %s\n", srv_sec);
	parse_fails(t, "no 'public = KEY'");
	parse_fails("public\n", "f.key:1: expected 'public = KEY'");
	snprintf(t, sizeof t, "\npublic = %s\npublic = %s\n", srv_pub, srv_pub);
	parse_fails(t, "f.key:3: 'public' given twice");
	snprintf(t, sizeof t, "public = %s\nkey = %s\n", srv_pub, srv_pub);
	parse_fails(t, "f.key:2: unknown key 'key'");
	parse_fails("public = rq:rM>}U?@Lns47E1%kR\n",
		    "f.key:1: public: expected 40 Z85");
	snprintf(t, sizeof t, "public = %s\nsecret = %.39s~\n", srv_pub,
		 srv_sec);
	parse_fails(t, "f.key:2: secret: expected 40 Z85");
	/* a NUL inside the value */
	{
		char z[64];
		struct qw_auth_key k;

		snprintf(z, sizeof z, "public = %s", srv_pub);
		z[20] = '\0';
		assert_int_equal(qw_auth_key_parse(z, 9 + 40, "n", &k, NULL, 0),
				 QW_EFORMAT);
	}
}

/* ---- files ---------------------------------------------------------------- */

static void test_load_modes(void **state)
{
	struct fx *f = *state;
	static const mode_t bad[] = {0644, 0640, 0604, 0660, 0606, 0700 | 04};
	struct qw_auth_key k;
	char text[256], path[128], want[32];
	size_t i;

	snprintf(text, sizeof text, "public = %s\nsecret = %s\n", srv_pub,
		 srv_sec);
	path_of(f, "s.key", path);
	for (i = 0; i < sizeof bad / sizeof bad[0]; i++) {
		put(f, "s.key", text, bad[i]);
		assert_int_equal(qw_auth_key_load(path, 1, &k, f->err,
						  sizeof f->err), QW_EFORMAT);
		snprintf(want, sizeof want, "(mode %04o)", (unsigned)bad[i]);
		assert_non_null(strstr(f->err, want));
		assert_non_null(strstr(f->err, "open to group or others"));
		assert_non_null(strstr(f->err, path));
	}
	put(f, "s.key", text, 0600);
	assert_int_equal(qw_auth_key_load(path, 1, &k, f->err, sizeof f->err),
			 0);
	assert_true(k.has_secret);
	assert_string_equal(k.name, "s");
	put(f, "s.key", text, 0400);
	assert_int_equal(qw_auth_key_load(path, 1, &k, f->err, sizeof f->err),
			 0);
	qw_auth_key_clear(&k);
	/* a public file may be world-readable, but holds no secret */
	assert_int_equal(qw_auth_key_load(path, 0, &k, f->err, sizeof f->err),
			 QW_EFORMAT);
	assert_non_null(strstr(f->err, "holds a secret key"));
}

static void test_load_errors(void **state)
{
	struct fx *f = *state;
	struct qw_auth_key k;
	char text[256], path[128], big[QW_AUTH_FILE_MAX + 64];

	path_of(f, "p.pub", path);
	snprintf(text, sizeof text, "public = %s\n", srv_pub);
	put(f, "p.pub", text, 0644);
	assert_int_equal(qw_auth_key_load(path, 0, &k, f->err, sizeof f->err),
			 0);
	assert_false(k.has_secret);
	assert_string_equal(k.name, "p");
	put(f, "p.pub", text, 0600);
	assert_int_equal(qw_auth_key_load(path, 1, &k, f->err, sizeof f->err),
			 QW_EFORMAT);
	assert_non_null(strstr(f->err, "no 'secret = KEY' line"));
	/* the public line of another key */
	path_of(f, "s.key", path);
	snprintf(text, sizeof text, "public = %s\nsecret = %s\n", cli_pub,
		 srv_sec);
	put(f, "s.key", text, 0600);
	assert_int_equal(qw_auth_key_load(path, 1, &k, f->err, sizeof f->err),
			 QW_EFORMAT);
	assert_non_null(strstr(f->err, "not the one of the secret key"));
	assert_false(k.has_secret);
	/* absent, a directory, too large */
	path_of(f, "none.key", path);
	assert_int_equal(qw_auth_key_load(path, 0, &k, f->err, sizeof f->err),
			 QW_EFORMAT);
	assert_non_null(strstr(f->err, "No such file"));
	assert_int_equal(qw_auth_key_load(f->dir, 0, &k, f->err,
					  sizeof f->err), QW_EFORMAT);
	assert_non_null(strstr(f->err, "not a regular file"));
	memset(big, '#', sizeof big - 1);
	big[sizeof big - 1] = '\0';
	put(f, "big.key", big, 0600);
	path_of(f, "big.key", path);
	assert_int_equal(qw_auth_key_load(path, 1, &k, f->err, sizeof f->err),
			 QW_EFORMAT);
	assert_non_null(strstr(f->err, "a key file has at most"));
}

static void test_write_round_trip(void **state)
{
	struct fx *f = *state;
	struct qw_auth_key k, back;
	char sec[128], pub[128];
	struct stat st;

	memset(&k, 0, sizeof k);
	snprintf(k.name, sizeof k.name, "w");
	assert_int_equal(qw_bus_curve_keypair(k.pub, k.sec), 0);
	k.has_secret = 1;
	path_of(f, "w.key", sec);
	path_of(f, "w.pub", pub);
	assert_int_equal(qw_auth_key_write(sec, &k, 1, 0, f->err,
					   sizeof f->err), 0);
	assert_int_equal(qw_auth_key_write(pub, &k, 0, 0, f->err,
					   sizeof f->err), 0);
	assert_int_equal(stat(sec, &st), 0);
	assert_int_equal(st.st_mode & 07777, 0600);
	assert_int_equal(stat(pub, &st), 0);
	assert_int_equal(st.st_mode & 07777, 0644);
	assert_int_equal(qw_auth_key_load(sec, 1, &back, f->err,
					  sizeof f->err), 0);
	assert_memory_equal(back.pub, k.pub, QW_BUS_KEY_BYTES);
	assert_memory_equal(back.sec, k.sec, QW_BUS_KEY_BYTES);
	assert_int_equal(qw_auth_key_load(pub, 0, &back, f->err,
					  sizeof f->err), 0);
	assert_memory_equal(back.pub, k.pub, QW_BUS_KEY_BYTES);
	/* no overwrite without force; force replaces */
	k.pub[0] ^= 1;
	assert_int_equal(qw_auth_key_write(pub, &k, 0, 0, f->err,
					   sizeof f->err), QW_EIO);
	assert_non_null(strstr(f->err, "exists; not replaced"));
	assert_int_equal(qw_auth_key_load(pub, 0, &back, f->err,
					  sizeof f->err), 0);
	assert_int_not_equal(back.pub[0], k.pub[0]);
	assert_int_equal(qw_auth_key_write(pub, &k, 0, 1, f->err,
					   sizeof f->err), 0);
	assert_int_equal(qw_auth_key_load(pub, 0, &back, f->err,
					  sizeof f->err), 0);
	assert_memory_equal(back.pub, k.pub, QW_BUS_KEY_BYTES);
	/* a directory that is not there */
	assert_int_equal(qw_auth_key_write("/nonexistent/dir/x.pub", &k, 0, 0,
					   f->err, sizeof f->err), QW_EIO);
	qw_auth_key_clear(&k);
}

/* ---- the allowed directory and ZAP ---------------------------------------- */

static void make_clients(struct fx *f)
{
	char text[256], path[128];

	path_of(f, "c", path);
	assert_int_equal(mkdir(path, 0755), 0);
	snprintf(text, sizeof text, "public = %s\n", cli_pub);
	put(f, "c/one.pub", text, 0644);
	snprintf(text, sizeof text, "public = %s\n", srv_pub);
	put(f, "c/two.pub", text, 0644);
	put(f, "c/.hidden.pub", "not a key\n", 0644);
	put(f, "c/notes.txt", "not a key either\n", 0644);
}

static void test_allowed(void **state)
{
	struct fx *f = *state;
	unsigned char k[QW_BUS_KEY_BYTES];
	const struct qw_auth_key *e;
	char path[128];
	qw_auth *a;

	make_clients(f);
	path_of(f, "c", path);
	assert_int_equal(qw_auth_load(path, &a, f->err, sizeof f->err), 0);
	assert_int_equal(qw_auth_count(a), 2);
	qw_auth_z85_decode(cli_pub, 40, k);
	e = qw_auth_find(a, k);
	assert_non_null(e);
	assert_string_equal(e->name, "one");
	qw_auth_z85_decode(srv_pub, 40, k);
	assert_string_equal(qw_auth_find(a, k)->name, "two");
	k[5] ^= 0x40;
	assert_null(qw_auth_find(a, k));
	assert_null(qw_auth_find(NULL, k));
	qw_auth_free(a);
	qw_auth_free(NULL);
	/* one bad entry spoils the directory, named with its line */
	put(f, "c/bad.pub", "# x\npublic = 123\n", 0644);
	assert_int_equal(qw_auth_load(path, &a, f->err, sizeof f->err),
			 QW_EFORMAT);
	assert_null(a);
	assert_non_null(strstr(f->err, "bad.pub:2: public: expected 40"));
	path_of(f, "nosuch", path);
	assert_int_equal(qw_auth_load(path, &a, f->err, sizeof f->err),
			 QW_EFORMAT);
	assert_non_null(strstr(f->err, "No such file"));
}

/* A ZAP request as libzmq sends it for a CURVE client with key z85. */
static void zap_request(struct qw_bus_parts *p, const char *mech,
			const char *z85)
{
	const char *s[6] = {"1.0", "req-2385", "quadwatch", "127.0.0.1",
			    "", mech};
	unsigned i;

	memset(p, 0, sizeof *p);
	for (i = 0; i < 6; i++) {
		p->len[i] = strlen(s[i]);
		memcpy(p->data[i], s[i], p->len[i]);
	}
	p->n = 6;
	if (z85 != NULL) {
		qw_auth_z85_decode(z85, 40, p->data[6]);
		p->len[6] = QW_BUS_KEY_BYTES;
		p->n = 7;
	}
}

static void assert_frame(const struct qw_bus_parts *p, unsigned i,
			 const char *s)
{
	assert_true(i < p->n);
	assert_int_equal(p->len[i], strlen(s));
	assert_memory_equal(p->data[i], s, p->len[i]);
}

static void test_zap(void **state)
{
	struct fx *f = *state;
	struct qw_bus_parts req, rep;
	struct qw_auth_verdict v;
	char path[128];
	qw_auth *a;

	make_clients(f);
	path_of(f, "c", path);
	assert_int_equal(qw_auth_load(path, &a, f->err, sizeof f->err), 0);
	zap_request(&req, "CURVE", cli_pub);
	assert_int_equal(qw_auth_zap(a, &req, &rep, &v), 0);
	assert_int_equal(rep.n, 6);
	assert_frame(&rep, 0, "1.0");
	assert_frame(&rep, 1, "req-2385");
	assert_frame(&rep, 2, "200");
	assert_frame(&rep, 4, "one");
	assert_frame(&rep, 5, "");
	assert_true(v.allowed);
	assert_string_equal(v.key, cli_pub);
	assert_string_equal(v.address, "127.0.0.1");
	/* a key not listed */
	req.data[6][0] ^= 1;
	assert_int_equal(qw_auth_zap(a, &req, &rep, &v), 0);
	assert_frame(&rep, 2, "400");
	assert_frame(&rep, 3, "key not in client_keys");
	assert_false(v.allowed);
	/* no list: any CURVE key */
	assert_int_equal(qw_auth_zap(NULL, &req, &rep, &v), 0);
	assert_frame(&rep, 2, "200");
	assert_frame(&rep, 4, "anonymous");
	/* other mechanisms, wrong credentials */
	zap_request(&req, "NULL", NULL);
	assert_int_equal(qw_auth_zap(NULL, &req, &rep, &v), 0);
	assert_frame(&rep, 2, "400");
	assert_string_equal(v.why, "not CURVE");
	zap_request(&req, "CURVE", cli_pub);
	req.len[6] = 31;
	assert_int_equal(qw_auth_zap(a, &req, &rep, &v), 0);
	assert_frame(&rep, 2, "400");
	assert_string_equal(v.why, "malformed request");
	/* broken requests still get a reply: a REP socket must answer */
	zap_request(&req, "CURVE", cli_pub);
	memcpy(req.data[0], "2.0", 3);
	assert_int_equal(qw_auth_zap(a, &req, &rep, &v), QW_EFORMAT);
	assert_int_equal(rep.n, 6);
	assert_frame(&rep, 1, "req-2385");
	assert_frame(&rep, 2, "500");
	assert_false(v.allowed);
	req.n = 1;
	assert_int_equal(qw_auth_zap(a, &req, &rep, &v), QW_EFORMAT);
	assert_frame(&rep, 1, "");
	assert_frame(&rep, 2, "500");
	zap_request(&req, "CURVE", cli_pub);
	req.len[3] = QW_BUS_PART_BYTES + 1; /* cut on receive */
	assert_int_equal(qw_auth_zap(a, &req, &rep, &v), QW_EFORMAT);
	qw_auth_free(a);
}

static void test_client(void **state)
{
	struct fx *f = *state;
	struct qw_bus_curve c, c2;
	char text[256], pub[128], sec[128];
	unsigned char want[QW_BUS_KEY_BYTES];

	snprintf(text, sizeof text, "public = %s\n", srv_pub);
	put(f, "p.pub", text, 0644);
	snprintf(text, sizeof text, "public = %s\nsecret = %s\n", cli_pub,
		 cli_sec);
	put(f, "a.key", text, 0600);
	path_of(f, "p.pub", pub);
	path_of(f, "a.key", sec);
	assert_int_equal(qw_auth_client(sec, pub, &c, f->err, sizeof f->err),
			 0);
	assert_false(c.server);
	qw_auth_z85_decode(srv_pub, 40, want);
	assert_memory_equal(c.server_key, want, sizeof want);
	qw_auth_z85_decode(cli_pub, 40, want);
	assert_memory_equal(c.public_key, want, sizeof want);
	/* session pairs: fresh each time, and consistent */
	assert_int_equal(qw_auth_client(NULL, pub, &c, f->err, sizeof f->err),
			 0);
	assert_int_equal(qw_auth_client(NULL, pub, &c2, f->err,
					sizeof f->err), 0);
	assert_memory_not_equal(c.public_key, c2.public_key, QW_BUS_KEY_BYTES);
	assert_int_equal(qw_bus_curve_public(c.secret_key, want), 0);
	assert_memory_equal(want, c.public_key, QW_BUS_KEY_BYTES);
	/* the server's secret file is not its public key */
	assert_int_equal(qw_auth_client(NULL, sec, &c, f->err, sizeof f->err),
			 QW_EFORMAT);
	chmod(sec, 0644);
	assert_int_equal(qw_auth_client(sec, pub, &c, f->err, sizeof f->err),
			 QW_EFORMAT);
	assert_non_null(strstr(f->err, "(mode 0644)"));
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(test_z85_rfc32),
		cmocka_unit_test(test_z85_keys),
		cmocka_unit_test(test_z85_errors),
		cmocka_unit_test(test_parse_good),
		cmocka_unit_test(test_parse_errors),
		cmocka_unit_test_setup_teardown(test_load_modes, setup,
						teardown),
		cmocka_unit_test_setup_teardown(test_load_errors, setup,
						teardown),
		cmocka_unit_test_setup_teardown(test_write_round_trip, setup,
						teardown),
		cmocka_unit_test_setup_teardown(test_allowed, setup, teardown),
		cmocka_unit_test_setup_teardown(test_zap, setup, teardown),
		cmocka_unit_test_setup_teardown(test_client, setup, teardown),
	};

	if (!qw_bus_has_curve()) {
		printf("# libzmq without CURVE: auth tests skipped\n");
		return 0;
	}
	return cmocka_run_group_tests(tests, NULL, NULL);
}
