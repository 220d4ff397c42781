/* cmd.h: the verbs of the quadwatch program, one file each in src/cmd/.
 * Each takes the arguments after the verb (argv[0] is the verb) and returns
 * the exit code: 0 ok, 1 runtime failure, 2 usage or configuration error. */
#ifndef QW_CMD_H
#define QW_CMD_H

#define QW_EXIT_OK 0
#define QW_EXIT_FAIL 1
#define QW_EXIT_USAGE 2

int qw_cmd_run(int argc, char **argv);
int qw_cmd_replay(int argc, char **argv);
int qw_cmd_record(int argc, char **argv);
int qw_cmd_sim(int argc, char **argv);
int qw_cmd_tail(int argc, char **argv);
int qw_cmd_check(int argc, char **argv);
int qw_cmd_ctl(int argc, char **argv);
int qw_cmd_relay(int argc, char **argv);
int qw_cmd_keygen(int argc, char **argv);
int qw_cmd_fit(int argc, char **argv);

#endif
