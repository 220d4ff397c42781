#!/bin/sh
# t_deb.sh: the Debian package.  tools/build-deb builds it in a scratch
# copy (the work tree must stay as it was) and fails on any lintian error;
# then the file list (dpkg-deb -c) holds the program, every man page, the
# unit (unchanged: PREFIX=/usr is the unit's own), the header, the library,
# the pkg-config file (its version the package's) and the example
# configuration; no maintainer script creates users or directories (the
# unit's DynamicUser and StateDirectory do); and the program extracted
# from the .deb (dpkg-deb -x) checks the shipped example configuration.
cd "$(dirname "$0")/.." || exit 2
for c in dpkg-buildpackage dh lintian dpkg-deb; do
	command -v "$c" >/dev/null || { echo "$c missing"; exit 77; }
done
dir=$(mktemp -d)
trap 'rm -rf "$dir"' EXIT
fail() { echo "FAIL: $*"; exit 1; }
git_state() { git status --porcelain --untracked-files=all 2>/dev/null; }
before=$(git_state)
tools/build-deb "$dir/out" >"$dir/log" 2>&1 ||
	{ cat "$dir/log"; fail "tools/build-deb exited $?"; }
grep '^# build-deb' "$dir/log"
grep -E '^[WE]: ' "$dir/log" | sed 's/^/# lintian: /'
[ "$(git_state)" = "$before" ] || fail "tools/build-deb changed the work tree"
set -- "$dir"/out/quadwatch_*.deb
deb=$1
[ -f "$deb" ] || fail "no quadwatch_*.deb in the output directory"

dpkg-deb -c "$deb" | awk '{ print $6 }' | sed 's|^\./|/|' >"$dir/list"
has() { grep -Eqx "$1" "$dir/list" || fail "not in the package: $1"; }
has /usr/bin/quadwatch
for m in docs/man/*.[135]; do
	has "/usr/share/man/man${m##*.}/$(basename "$m")\\.gz"
done
has '(/usr)?/lib/systemd/system/quadwatch\.service'
has /usr/include/quadwatch\\.h
has '/usr/lib/([a-z0-9_]+-[a-z0-9_-]+/)?libquadwatch\.a'
has '/usr/lib/([a-z0-9_]+-[a-z0-9_-]+/)?pkgconfig/quadwatch\.pc'
has /usr/share/doc/quadwatch/example\\.ini
has /usr/share/doc/quadwatch/copyright
grep -q '^/usr/local\|/build/' "$dir/list" && fail "stray paths: $(grep '^/usr/local\|/build/' "$dir/list")"

dpkg-deb -e "$deb" "$dir/ctrl"
for s in "$dir"/ctrl/preinst "$dir"/ctrl/postinst "$dir"/ctrl/prerm "$dir"/ctrl/postrm; do
	[ -f "$s" ] || continue
	grep -En 'adduser|useradd|groupadd|mkdir|install +-d|chown' "$s" &&
		fail "$(basename "$s") creates users or directories by hand"
done

root="$dir/root"
dpkg-deb -x "$deb" "$root"
unit=$(find "$root" -path '*/systemd/system/quadwatch.service')
cmp -s "$unit" conf/quadwatch.service || fail "the packaged unit differs"
ver=$(dpkg-deb -f "$deb" Version)
pc=$(find "$root" -name quadwatch.pc)
grep -qx "Version: ${ver%%-*}" "$pc" || fail "quadwatch.pc version != $ver"
grep -qx "libdir=/usr/lib/.*" "$pc" || fail "quadwatch.pc libdir"
"$root/usr/bin/quadwatch" check -c "$root/usr/share/doc/quadwatch/example.ini" \
	>"$dir/check.out" 2>&1 ||
	fail "extracted quadwatch check exited $?: $(cat "$dir/check.out")"
grep -Eq '^group: +example$' "$dir/check.out" || fail "check output: $(cat "$dir/check.out")"
echo "# deb: $(basename "$deb"), $(wc -l <"$dir/list") entries; extracted program checks the example"
exit 0
