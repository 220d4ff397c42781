#!/bin/sh
# CURVE keys and [security]: `quadwatch keygen` writes NAME.key (0600) and
# NAME.pub (0644), prints the public key, never replaces a file without
# --force; `quadwatch run` refuses (exit 2, a clear message) a secret key
# open to group or others, a public file given as server_key, a key whose
# public line is not its secret's, client_keys or publisher_key without
# server_key, a missing clients directory and a malformed client key.
# Then the end-to-end test over the bus (e2e_curve.py).
cd "$(dirname "$0")/.." || exit 2
QW=${BUILD:-build}/quadwatch
[ -x "$QW" ] || { echo "$QW not built"; exit 77; }
T=$(mktemp -d) || exit 2
trap 'rm -rf "$T"' EXIT
fail() { echo "FAIL: $*"; exit 1; }

# ---- keygen --------------------------------------------------------------
out=$("$QW" keygen "$T/server" 2>"$T/err") || fail "keygen: $(cat "$T/err")"
[ "$(stat -c %a "$T/server.key")" = 600 ] || fail "server.key mode $(stat -c %a "$T/server.key")"
[ "$(stat -c %a "$T/server.pub")" = 644 ] || fail "server.pub mode $(stat -c %a "$T/server.pub")"
grep -qxF "public = $out" "$T/server.pub" || fail "printed key $out not in server.pub"
grep -qxF "public = $out" "$T/server.key" || fail "printed key $out not in server.key"
grep -q '^secret = ' "$T/server.pub" && fail "secret in server.pub"
[ "$(grep -c '^secret = .\{40\}$' "$T/server.key")" = 1 ] || fail "no secret line"
sum=$(cat "$T/server.key" "$T/server.pub" | cksum)
"$QW" keygen "$T/server" >/dev/null 2>"$T/err"
rc=$?
[ $rc = 1 ] || fail "keygen over existing files: exit $rc"
grep -q 'exists; not replaced' "$T/err" || fail "keygen message: $(cat "$T/err")"
[ "$(cat "$T/server.key" "$T/server.pub" | cksum)" = "$sum" ] || fail "files changed"
rm "$T/server.key"
"$QW" keygen "$T/server" >/dev/null 2>&1 && fail "keygen with .pub left over"
[ -e "$T/server.key" ] && fail "keygen wrote server.key beside an existing .pub"
out2=$("$QW" keygen --force "$T/server" 2>/dev/null) || fail "keygen --force"
[ "$out2" != "$out" ] || fail "--force kept the old key"
[ "$(stat -c %a "$T/server.key")" = 600 ] || fail "forced server.key mode"
[ "$(stat -c %a "$T/server.pub")" = 644 ] || fail "forced server.pub mode"
ls "$T" | grep -q tmp && fail "temporary files left: $(ls "$T")"
"$QW" keygen >/dev/null 2>&1; [ $? = 2 ] || fail "keygen without NAME"
"$QW" keygen a b >/dev/null 2>&1; [ $? = 2 ] || fail "keygen with two names"
"$QW" keygen "$T/no/such/dir/k" >/dev/null 2>&1; [ $? = 1 ] || fail "keygen into a missing directory"
"$QW" keygen "$T/op" >/dev/null 2>&1 || fail "keygen op"
echo "# keygen: modes 0600/0644, no overwrite without --force"

# ---- run refuses bad keys with exit 2 --------------------------------------
mkdir "$T/clients" && cp "$T/op.pub" "$T/clients/"
conf() { # $1: the [security] lines
	cat >"$T/qw.ini" <<EOF
[bus]
input = @ipc://$T/in
alerts = @ipc://$T/alerts
control = @ipc://$T/control
[group skid]
channels = supply_t, return_t, flow, pump_amps
[security]
$1
EOF
}
refused() { # $1: what; $2: expected text in the message
	timeout 10 "$QW" run -c "$T/qw.ini" >/dev/null 2>"$T/err"
	rc=$?
	[ $rc = 2 ] || fail "$1: exit $rc, $(cat "$T/err")"
	grep -q -- "$2" "$T/err" || fail "$1: message $(cat "$T/err")"
	# check loads the keys as run does, so it refuses the same file
	"$QW" check -q -c "$T/qw.ini" 2>"$T/err.check"
	rc=$?
	[ $rc = 2 ] || fail "$1: check exit $rc"
	grep -q -- "$2" "$T/err.check" || fail "$1: check said $(cat "$T/err.check")"
}
conf "server_key = $T/server.key
client_keys = $T/clients"
chmod 644 "$T/server.key"
refused "secret key mode 0644" "secret key file is open to group or others (mode 0644)"
grep -q "chmod 600 $T/server.key" "$T/err" || fail "no chmod hint: $(cat "$T/err")"
chmod 640 "$T/server.key"
refused "secret key mode 0640" "(mode 0640)"
chmod 604 "$T/server.key"
refused "secret key mode 0604" "(mode 0604)"
chmod 600 "$T/server.key"
conf "server_key = $T/server.pub"
chmod 600 "$T/server.pub"
refused "public file as server_key" "no 'secret = KEY' line"
chmod 644 "$T/server.pub"
{ grep '^public' "$T/server.pub"; grep '^secret' "$T/op.key"; } >"$T/bad.key"
chmod 600 "$T/bad.key"
conf "server_key = $T/bad.key"
refused "public line of another key" "not the one of the secret key"
conf "client_keys = $T/clients"
refused "client_keys alone" "client_keys needs server_key"
conf "publisher_key = $T/op.pub"
refused "publisher_key alone" "publisher_key needs server_key"
conf "server_key = $T/server.key
client_keys = $T/nosuch"
refused "missing clients directory" "$T/nosuch: No such file"
printf 'public = short\n' >"$T/clients/typo.pub"
conf "server_key = $T/server.key
client_keys = $T/clients"
refused "malformed client key" "typo.pub:1: public: expected 40 Z85"
rm "$T/clients/typo.pub"
cp "$T/op.key" "$T/clients/leak.pub"
refused "secret key in clients" "leak.pub: holds a secret key"
rm "$T/clients/leak.pub"
echo "# run and check: bad key files refused with exit 2"

cd tests && exec timeout 120 /usr/bin/python3 e2e_curve.py
