/* main.c: dispatches the verbs of the quadwatch program (see cmd.h and
 * quadwatch(1)).  A verb whose file is not built yet is simply absent:
 * weak references keep the table honest about what exists. */
#include <stdio.h>
#include <string.h>

#include "cmd.h"

#pragma weak qw_cmd_run
#pragma weak qw_cmd_replay
#pragma weak qw_cmd_record
#pragma weak qw_cmd_sim
#pragma weak qw_cmd_tail
#pragma weak qw_cmd_check
#pragma weak qw_cmd_ctl
#pragma weak qw_cmd_relay
#pragma weak qw_cmd_keygen
#pragma weak qw_cmd_fit

static const struct {
	const char *name;
	int (*fn)(int, char **);
	const char *usage;
} verbs[] = {
	{"run", qw_cmd_run, "run -c FILE [-v|-q]          the daemon"},
	{"replay", qw_cmd_replay,
	 "replay -c FILE [--group G] [--json] [--scores OUT.csv]\n"
	 "              [--report OUT.html] [--labels COLUMN] INPUT..."},
	{"record", qw_cmd_record, "record -c FILE -o OUT       capture the bus"},
	{"sim", qw_cmd_sim,
	 "sim -c FILE [--to ENDPOINT | -o OUT.csv] [--rate HZ] [--count N]"},
	{"tail", qw_cmd_tail, "tail ENDPOINT [--json]      print alerts"},
	{"check", qw_cmd_check, "check -c FILE               validate config"},
	{"ctl", qw_cmd_ctl,
	 "ctl ENDPOINT CMD            status | rebaseline GROUP | save | reload"},
	{"relay", qw_cmd_relay, "relay FRONTEND BACKEND      fan-in of alerts"},
	{"keygen", qw_cmd_keygen, "keygen [--force] NAME       CURVE key pair"},
	{"fit", qw_cmd_fit,
	 "fit -c FILE [--group G] [-o DIR] [--no-trim] INPUT...\n"
	 "                            model from a healthy recording"},
};

static void usage(FILE *f)
{
	size_t i;

	fprintf(f, "usage: quadwatch VERB [options]\n");
	for (i = 0; i < sizeof verbs / sizeof verbs[0]; i++)
		if (verbs[i].fn != NULL)
			fprintf(f, "  quadwatch %s\n", verbs[i].usage);
	fprintf(f, "quadwatch is an advisory monitor, not a safety "
		   "instrumented system.\n");
}

int main(int argc, char **argv)
{
	size_t i;

	if (argc < 2) {
		usage(stderr);
		return QW_EXIT_USAGE;
	}
	if (strcmp(argv[1], "-h") == 0 || strcmp(argv[1], "--help") == 0) {
		usage(stdout);
		return QW_EXIT_OK;
	}
	for (i = 0; i < sizeof verbs / sizeof verbs[0]; i++)
		if (verbs[i].fn != NULL && strcmp(argv[1], verbs[i].name) == 0)
			return verbs[i].fn(argc - 1, argv + 1);
	fprintf(stderr, "quadwatch: unknown verb '%s'\n", argv[1]);
	usage(stderr);
	return QW_EXIT_USAGE;
}
