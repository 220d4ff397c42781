/* config_err_cases.h: the table of configuration errors test_config.c
 * runs: each text is loaded as "t.ini" and must fail with QW_EFORMAT and a
 * message that begins with want, its exact FILE:LINE: [section] key.
 * Included by tests/test_config.c only. */
#ifndef QW_CONFIG_ERR_CASES_H
#define QW_CONFIG_ERR_CASES_H

/* One error case: text, and the exact start of the message. */
struct err_case {
	const char *text;
	const char *want;
};

#define G "[group a]\nchannels = x, y\n" /* lines 1-2 */

static const struct err_case err_cases[] = {
	{"[bux]\n", "t.ini:1: [bux]: unknown section; expected [bus]"},
	{"[bus]\n[state]\n[bus]\n" G,
	 "t.ini:3: [bus]: expected each section once; first on line 1"},
	{"[bus]\ninputs = >tcp://a:1\n" G,
	 "t.ini:2: [bus] inputs: unknown key; expected one of input, alerts, "
	 "control, stats_every, max_frame"},
	{"rate = 10\n" G, "t.ini:1: rate: expected a [section] header"},
	{G "halflife = 3\n", "t.ini:3: [group a] halflife: unknown key; "
	 "expected one of channels, half_life,"},
	{G "rate = 10\nrate = 20\n", "t.ini:4: [group a] rate: expected each "
	 "key once per section; first set on line 3"},
	{G "[group b]\nchannels = z\n[group a]\nchannels = z\n",
	 "t.ini:5: [group a]: expected each group once; first on line 1"},
	{"[group a b]\nchannels = x\n", "t.ini:1: [group a b]: expected "
	 "[group NAME], NAME of 1 to 63 characters"},
	{"[group a/b]\nchannels = x\n", "t.ini:1: [group a/b]: expected"},
	{"[group]\nchannels = x\n", "t.ini:1: [group]: expected [group NAME]"},
	{"[group "
	 "g123456789012345678901234567890123456789012345678901234567890123]\n"
	 "channels = x\n", "t.ini:1: [group g1234567890123456789012345678901"
	 "23456789012345678901234567890123]: expected "
	 "[group NAME], NAME of 1 to 63 characters"},
	{"[group "
	 "g12345678901234567890123456789012345678901234567890123456789012345"
	 "67890123456789012345678901234567890]\n", "t.ini:1: expected a "
	 "section name shorter than 96 bytes"},
	{G "= 5\n", "t.ini:3: [group a]: expected a key name before '='"},
	{"[group a]\nrate = 10\n[group b]\nchannels = x\n",
	 "t.ini:1: [group a] channels: required key missing"},
	{"[bus]\nalerts = @tcp://127.0.0.1:7\n",
	 "t.ini:2: expected at least one [group NAME] section"},
	{"", "t.ini:1: expected at least one [group NAME] section"},
	{"[bus]\n[state]\n[security]\n", "t.ini:3: expected at least one"},
	{G "rate = ten\n", "t.ini:3: [group a] rate: expected readings per "
	 "second, a number > 0; got 'ten'"},
	{G "rate = 0\n", "t.ini:3: [group a] rate: expected readings"},
	{G "rate = -2.385\n", "t.ini:3: [group a] rate: expected readings"},
	{G "rate = nan\n", "t.ini:3: [group a] rate: expected readings"},
	{G "rate = inf\n", "t.ini:3: [group a] rate: expected readings"},
	{G "rate = 1e999\n", "t.ini:3: [group a] rate: expected readings"},
	{G "rate = 0x10\n", "t.ini:3: [group a] rate: expected readings"},
	{G "rate = 10 # Hz\n", "t.ini:3: [group a] rate: expected readings"},
	{G "alarms_per_day = 0\n", "t.ini:3: [group a] alarms_per_day: "
	 "expected raised alarms per day, a number > 0"},
	{G "alarms_per_day = 1e9\n", "t.ini:3: [group a] alarms_per_day: "
	 "expected fewer alarms per day than 1 readings/s with persist 1/1"},
	{G "rate = 1e-6\n", "t.ini:1: [group a] alarms_per_day: expected "
	 "fewer alarms per day"},
	{G "half_life = 0\n", "t.ini:3: [group a] half_life: expected a "
	 "number of readings > 0, or a duration"},
	{G "half_life = -5\n", "t.ini:3: [group a] half_life: expected"},
	{G "half_life = 10 m\n", "t.ini:3: [group a] half_life: expected"},
	{G "half_life = 2 weeks\n", "t.ini:3: [group a] half_life: expected"},
	{G "half_life = 1e400s\n", "t.ini:3: [group a] half_life: expected"},
	{G "half_life = 1e304d\n", "t.ini:3: [group a] half_life: expected"},
	{G "floor = 1, 2, 3\nrate = 5\n", "t.ini:3: [group a] floor: "
	 "expected 1 value or 2 (one per channel), got 3"},
	{G "floor = 0.1, -0.2\n", "t.ini:3: [group a] floor: expected a "
	 "noise floor >= 0 (std dev, channel units; 0 = auto), got '-0.2' "
	 "(item 2)"},
	{G "floor = 0.1, nan\n", "t.ini:3: [group a] floor: expected a noise"},
	{G "floor = 0.1,\n", "t.ini:3: [group a] floor: expected a noise "
	 "floor >= 0 (std dev, channel units; 0 = auto), got '' (item 2)"},
	{G "floor =\n", "t.ini:3: [group a] floor: expected 1 to 4096"},
	{G "persist = 3/2\n", "t.ini:3: [group a] persist: expected k/m with "
	 "1 <= k <= m <= 64"},
	{G "persist = 0/1\n", "t.ini:3: [group a] persist: expected k/m"},
	{G "persist = 1/65\n", "t.ini:3: [group a] persist: expected k/m"},
	{G "persist = 1-1\n", "t.ini:3: [group a] persist: expected k/m"},
	{G "persist = 1/\n", "t.ini:3: [group a] persist: expected k/m"},
	{G "persist = /2\n", "t.ini:3: [group a] persist: expected k/m"},
	{G "persist = 1/1/1\n", "t.ini:3: [group a] persist: expected k/m"},
	{G "clear = 0\n", "t.ini:3: [group a] clear: expected a whole number "
	 "of readings from 1 to"},
	{G "clear = 4294967296\n", "t.ini:3: [group a] clear: expected"},
	{G "clear = 2.5\n", "t.ini:3: [group a] clear: expected"},
	{G "learn = maybe\n", "t.ini:3: [group a] learn: expected skip, clip "
	 "or all; got 'maybe'"},
	{G "partial = sometimes\n", "t.ini:3: [group a] partial: expected "
	 "learn or hold; got 'sometimes'"},
	{G "mode = fancy\n", "t.ini:3: [group a] mode: expected plain or "
	 "mewma; got 'fancy'"},
	{G "mode = mewma\npersist = 2/3\n", "t.ini:4: [group a] persist: "
	 "expected 1/1 with mode = mewma"},
	{G "dynamics = var2\n", "t.ini:3: [group a] dynamics: expected none, "
	 "ar1 or var1; got 'var2'"},
	{G "max_gap = 3\n", "t.ini:3: [group a] max_gap: expected a duration"},
	{G "max_gap = -1s\n", "t.ini:3: [group a] max_gap: expected a "
	 "duration"},
	{G "smoothing = 0\n", "t.ini:3: [group a] smoothing: expected the "
	 "MEWMA weight, a number in (0, 1]"},
	{G "smoothing = 1.5\n", "t.ini:3: [group a] smoothing: expected the "
	 "MEWMA weight"},
	{G "correct = maybe\n", "t.ini:3: [group a] correct: expected yes or "
	 "no"},
	{G "warmup = -1\n", "t.ini:3: [group a] warmup: expected a whole "
	 "number of readings, or a duration"},
	{G "warmup = 10x\n", "t.ini:3: [group a] warmup: expected a whole"},
	{G "warmup = 2.385\n", "t.ini:3: [group a] warmup: expected a whole"},
	{G "warmup = 1e304d\n", "t.ini:3: [group a] warmup: expected a whole"},
	{G "warmup = 1e12d\nrate = 1000\n",
	 "t.ini:3: [group a] warmup: expected at most 2^53 readings"},
	{G "relearn_after = 1e12d\nrate = 1000\n",
	 "t.ini:3: [group a] relearn_after: expected at most 2^53 readings"},
	{G "relearn_after = soon\n", "t.ini:3: [group a] relearn_after: "
	 "expected a whole number"},
	{"[group a]\nchannels = p, q, p\n", "t.ini:2: [group a] channels: "
	 "expected each channel once; 'p' is listed twice"},
	{"[group a]\nchannels = p,, q\n", "t.ini:2: [group a] channels: "
	 "expected a channel name, got an empty item (item 2)"},
	{"[group a]\nchannels = p,\n", "t.ini:2: [group a] channels: "
	 "expected a channel name, got an empty item (item 2)"},
	{"[group a]\nchannels = p, sup ply\n", "t.ini:2: [group a] channels: "
	 "expected a channel name of 1 to 63 printable characters"},
	{"[group a]\nchannels = p, \"q\"\n", "t.ini:2: [group a] channels: "
	 "expected a channel name of 1"},
	{"[group a]\nchannels = "
	 "c123456789012345678901234567890123456789012345678901234567890123\n",
	 "t.ini:2: [group a] channels: expected a channel name of 1 to 63"},
	{"[group a]\nchannels =\n", "t.ini:2: [group a] channels: expected a "
	 "comma-separated list of channel names"},
	{"[bus]\ninput = tcp//x\n" G, "t.ini:2: [bus] input: expected an "
	 "endpoint such as @tcp://127.0.0.1:5602"},
	{"[bus]\ninput = >\n" G, "t.ini:2: [bus] input: expected an endpoint"},
	{"[bus]\ninput = @tcp://\n" G, "t.ini:2: [bus] input: expected an"},
	{"[bus]\ninput =\n" G, "t.ini:2: [bus] input: expected at least one "
	 "endpoint"},
	{"[bus]\ninput = inproc://a, >inproc://a\n" G, "t.ini:2: [bus] input: "
	 "expected each endpoint once; 'inproc://a' is listed twice"},
	{"[bus]\ninput = inproc://a,\n" G, "t.ini:2: [bus] input: expected"},
	{"[bus]\nalerts = @\n" G, "t.ini:2: [bus] alerts: expected an "
	 "endpoint"},
	{"[bus]\nalerts = @tcp://a b:1\n" G, "t.ini:2: [bus] alerts: expected "
	 "an endpoint such as @tcp://127.0.0.1:5602 or >ipc:///run/qw (no "
	 "blanks"},
	{"[bus]\ncontrol = 5603\n" G, "t.ini:2: [bus] control: expected an"},
	/* [bus] groups: the groups this daemon owns (config_shard.c) */
	{"[bus]\ngroups = a, zz\n" G, "t.ini:2: [bus] groups: expected names "
	 "of [group NAME] sections of this file; 'zz' is not one (groups: a)"},
	{"[bus]\ngroups = a,\n  zz\n" G, "t.ini:2: [bus] groups: expected "
	 "names of [group NAME] sections of this file; 'zz' is not one"},
	{G "[bus]\ngroups = A\n", "t.ini:4: [bus] groups: expected names of "
	 "[group NAME] sections of this file; 'A' is not one"},
	{"[bus]\ngroups = a, a\n" G, "t.ini:2: [bus] groups: expected each "
	 "group once; 'a' is listed twice"},
	{"[bus]\ngroups =\n" G, "t.ini:2: [bus] groups: expected a "
	 "comma-separated list of group names"},
	{"[bus]\ngroups = a,,\n" G, "t.ini:2: [bus] groups: expected a group "
	 "name, got an empty item (item 2)"},
	{"[bus]\ngroups = a\ngroups = a\n" G, "t.ini:3: [bus] groups: "
	 "expected each key once per section; first set on line 2"},
	{"[bus]\nmax_frame = 10\n" G, "t.ini:2: [bus] max_frame: expected a "
	 "size in bytes from 64 to 1073741824"},
	{"[bus]\nmax_frame = 2048MiB\n" G, "t.ini:2: [bus] max_frame: "
	 "expected a size"},
	{"[bus]\nmax_frame = 2GiB\n" G, "t.ini:2: [bus] max_frame: expected"},
	{"[bus]\nmax_frame = -4096\n" G, "t.ini:2: [bus] max_frame: expected"},
	{"[bus]\nstats_every = -1s\n" G, "t.ini:2: [bus] stats_every: "
	 "expected a duration >= 0 such as 30s"},
	{"[bus]\nstats_every = 10 parsec\n" G, "t.ini:2: [bus] stats_every: "
	 "expected a duration"},
	{"[state]\nevery = 0\n" G, "t.ini:2: [state] every: expected a "
	 "duration > 0"},
	{"[state]\ndir =\n" G, "t.ini:2: [state] dir: expected a path, got "
	 "nothing"},
	{"[security]\nserver_key =\n" G, "t.ini:2: [security] server_key: "
	 "expected a path"},
	{"[security]\nclient_keys =\n" G, "t.ini:2: [security] client_keys: "
	 "expected a path"},
	{G "rate = 10\n  20\n", "t.ini:3: [group a] rate: expected one value "
	 "on one line"},
	{G "garbage\n", "t.ini:3: expected 'key = value', a [section] header "
	 "or a comment"},
	{"[group a]\n  x\nchannels = y\n", "t.ini:2: expected 'key = value'"},
	{"[bus\n" G, "t.ini:1: expected ']' to close the section header"},
	{"[bus] x\n" G, "t.ini:1: expected only a comment after ']'"},
	{"[bux]\nfoo = 1\n" G, "t.ini:1: [bux]: unknown section"},
	/* the earliest line wins, whichever part found it */
	{G "rate = abc\ngarbage\n", "t.ini:3: [group a] rate: expected"},
	{"[group a]\ngarbage\nchannels = x\nrate = abc\n",
	 "t.ini:2: expected 'key = value'"},
	{"[group a]\nchannels = x\nfloor = 1, 2\ngarbage\n",
	 "t.ini:3: [group a] floor: expected 1 value (one channel), got 2"},
	/* MQTT: addresses in [bus] input, the [mqtt] section, across keys
	 * (the files named are checked apart: test_mqtt_files) */
#define MB "[bus]\ninput = mqtt://127.0.0.1:1883/plant/+/readings\n" /* 1-2 */
	{"[bus]\ninput = mqtt://127.0.0.1:1883/plant/readings\n" G,
	 "t.ini:2: [bus] input: expected exactly one '+' level in the topic "
	 "(it stands for the group name), got 'plant/readings'"},
	{"[bus]\ninput = mqtt://127.0.0.1:1883\n" G, "t.ini:2: [bus] input: "
	 "expected mqtt://HOST[:PORT]/TOPIC, got 'mqtt://127.0.0.1:1883' (no "
	 "topic)"},
	{"[bus]\ninput = mqtt://127.0.0.1:99999/a/+\n" G, "t.ini:2: [bus] "
	 "input: expected a port from 1 to 65535, got '99999'"},
	{"[bus]\ninput = mqtt://127.0.0.1:/a/+\n" G, "t.ini:2: [bus] input: "
	 "expected a port from 1 to 65535, got ''"},
	{"[bus]\ninput = mqtt://:1883/a/+\n" G, "t.ini:2: [bus] input: "
	 "expected a broker host before the topic"},
	{"[bus]\ninput = mqtt://[::1/a/+\n" G, "t.ini:2: [bus] input: "
	 "expected ']' after an IPv6 address"},
	{"[bus]\ninput = mqtt://h/a/#\n" G, "t.ini:2: [bus] input: expected a "
	 "topic without '#', blanks or control characters, got 'a/#'"},
	{"[bus]\ninput = mqtt://h/+/+\n" G, "t.ini:2: [bus] input: expected "
	 "exactly one '+' level"},
	{"[bus]\ninput = mqtt://h/a+/+\n" G, "t.ini:2: [bus] input: expected "
	 "'+' only as a whole topic level, got 'a+/+'"},
	{"[bus]\ninput = mqtt://h/\n" G, "t.ini:2: [bus] input: expected a "
	 "topic of 1 to 255 bytes after the broker"},
	{"[bus]\ninput = mqtt://h/a/+, mqtt://h:1884/b/+\n" G, "t.ini:2: [bus] "
	 "input: expected every mqtt:// input on one broker (h:1883); "
	 "'mqtt://h:1884/b/+' names another"},
	{"[bus]\ninput = mqtt://h/a/+, mqtts://h/b/+\n" G, "t.ini:2: [bus] "
	 "input: expected every mqtt:// input on one broker"},
	{"[bus]\ninput = mqtt://h/a/+, >tcp://h:1, mqtt://h/a/+\n" G,
	 "t.ini:2: [bus] input: expected each topic once; 'a/+' is listed "
	 "twice"},
	{MB "[mqtt]\nqos = 2\n" G, "t.ini:4: [mqtt] qos: expected 0 (at most "
	 "once) or 1 (at least once), got '2'"},
	{MB "[mqtt]\nqos = one\n" G, "t.ini:4: [mqtt] qos: expected 0"},
	{"[mqtt]\nqos = 1\n" G, "t.ini:1: [mqtt]: expected an mqtt:// item in "
	 "[bus] input or an alerts address; no broker is named"},
	{MB "[mqtt]\ncredentials =\n" G, "t.ini:4: [mqtt] credentials: "
	 "expected a file path"},
	{MB "[mqtt]\nkey_file =\n" G, "t.ini:4: [mqtt] key_file: expected a "
	 "file path"},
	{MB "[mqtt]\nca_file = /etc/passwd\n" G, "t.ini:4: [mqtt] ca_file: "
	 "expected an mqtts:// broker (TLS); the broker is named with "
	 "mqtt://"},
	{"[bus]\ninput = mqtts://h/p/+\n[mqtt]\ncert_file = /etc/passwd\n" G,
	 "t.ini:4: [mqtt] cert_file: expected cert_file and key_file together"},
	{MB "[mqtt]\nalerts = mqtt://other:1883/plant/+/alerts\n" G,
	 "t.ini:4: [mqtt] alerts: expected the broker of the mqtt:// inputs "
	 "(one connection)"},
	{MB "[mqtt]\nalerts = tcp://127.0.0.1:1883/plant/+\n" G, "t.ini:4: "
	 "[mqtt] alerts: expected mqtt://HOST[:PORT]/TOPIC or mqtts://..., "
	 "got 'tcp://127.0.0.1:1883/plant/+'"},
	/* shorter than "mqtt://": the check comes before any byte past
	 * the value is read (fuzz_config found that read, under ASan; as
	 * the file's first value, "m" sits at the end of a fresh 4-byte
	 * buffer, so check-asan catches the read again) */
	{"[mqtt]\nalerts = m\n" MB G, "t.ini:2: [mqtt] alerts: expected "
	 "mqtt://HOST[:PORT]/TOPIC or mqtts://..., got 'm'"},
	{MB "[mqtt]\nalerts = mqtt\n" G, "t.ini:4: [mqtt] alerts: expected "
	 "mqtt://HOST[:PORT]/TOPIC or mqtts://..., got 'mqtt'"},
	{MB "[mqtt]\nalerts = mqtt://127.0.0.1:1883/plant/alerts\n" G,
	 "t.ini:4: [mqtt] alerts: expected exactly one '+' level"},
	{MB "[mqtt]\nkeepalive = 1s\n" G, "t.ini:4: [mqtt] keepalive: "
	 "expected a duration from 5 s to 65535 s, such as 0.5, 30s or 2min, "
	 "got '1s'"},
	{MB "[mqtt]\nreconnect_min = 10s\nreconnect_max = 1s\n" G,
	 "t.ini:5: [mqtt] reconnect_min: expected reconnect_min <= "
	 "reconnect_max"},
	{MB "[mqtt]\nreconnect_max = 2h\n" G, "t.ini:4: [mqtt] reconnect_max: "
	 "expected a duration from 0.01 s to 3600 s"},
	{MB "[mqtt]\nclient_id = a\"b\x01\n" G, "t.ini:4: [mqtt] client_id: "
	 "expected a client id of printable characters, no blanks"},
	{MB "[mqtt]\nqos = 1\n[mqtt]\n" G, "t.ini:5: [mqtt]: expected each "
	 "section once; first on line 3"},
	{MB "[mqtt]\nport = 1883\n" G, "t.ini:4: [mqtt] port: unknown key; "
	 "expected one of alerts, qos, client_id, keepalive, reconnect_min, "
	 "reconnect_max, ca_file, cert_file, key_file, credentials"},
#undef MB
};

#endif
