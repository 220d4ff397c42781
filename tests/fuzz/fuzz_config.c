/* fuzz_config.c: libFuzzer harness for the configuration reader
 * (src/io/config*.c, through inih and the number parser).
 *
 * The bytes become a NUL-terminated text (a NUL inside ends it, as a C
 * string would) and go through qw_config_load_string.  On success every
 * group is looked up by name and fingerprinted, so the loaded structure is
 * walked; on error the message must name the file.  Either way the config
 * is freed: under -fsanitize=address a leak fails the run.
 * Seeds: tests/fuzz/corpus/config/.  Built and run by tools/fuzz (make
 * fuzz) from its default sources (src/io and src/core without the bus). */
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "config.h"

#define FUZZ_NAME "fuzz.ini" /* the name errors must start with */

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	char err[QW_CONFIG_ERR_MAX];
	struct qw_config cfg;
	char *text = malloc(size + 1);
	size_t i;
	int rc;

	if (text == NULL)
		return 0;
	memcpy(text, data, size);
	text[size] = '\0';
	rc = qw_config_load_string(text, FUZZ_NAME, &cfg, err, sizeof err);
	if (rc == 0) {
		/* A loaded config has groups and an input: ZeroMQ, or MQTT
		 * only (then cfg.ninputs is 0). */
		if (cfg.ngroups == 0 ||
		    (cfg.ninputs == 0 && cfg.mqtt.ninputs == 0))
			abort();
		for (i = 0; i < cfg.ngroups; i++) {
			if (qw_config_group(&cfg, cfg.groups[i].name) !=
			    &cfg.groups[i])
				abort();
			(void)qw_config_fingerprint(&cfg.groups[i]);
		}
	} else if (strncmp(err, FUZZ_NAME ":", sizeof FUZZ_NAME) != 0 ||
		   cfg.groups != NULL) {
		abort(); /* every message names the file; cfg left empty */
	}
	qw_config_free(&cfg);
	free(text);
	return 0;
}
