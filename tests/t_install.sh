#!/bin/sh
# t_install.sh: `make install` and `make uninstall` into a scratch DESTDIR.
# With the default PREFIX (/usr/local): every file is where it belongs;
# every installed man page renders with `man -l` without a groff or man
# warning (and a page with a bad macro proves that check can fail); the
# installed program checks the installed example configuration; every
# function of quadwatch.h is in libquadwatch(3)'s synopsis; the
# installed embedding example builds with the installed pkg-config file
# (PKG_CONFIG_PATH and PKG_CONFIG_SYSROOT_DIR into DESTDIR) and runs.
# With PREFIX=/opt/qw: the unit's paths follow PREFIX and the unit is
# otherwise the shipped one, byte for byte.  Uninstall leaves no file.
BUILD=${BUILD:-build}
cd "$(dirname "$0")/.." || exit 2
command -v man >/dev/null || { echo "man (man-db) missing"; exit 77; }
dir=$(mktemp -d)
trap 'rm -rf "$dir"' EXIT
fail() { echo "FAIL: $*"; exit 1; }
dest="$dir/root"
# make with the flags the build was made with, so that install never
# rebuilds a sanitized tree (make check-asan) without them.
mk() {
	if [ -n "${QW_SANITIZED:-}" ]; then
		make -s BUILD="$BUILD" OPT=-O1 SAN="$QW_SAN_FLAGS" "$@"
	else
		make -s BUILD="$BUILD" "$@"
	fi
}
mk DESTDIR="$dest" install >"$dir/log" 2>&1 ||
	{ cat "$dir/log"; fail "make install exited $?"; }

p="$dest/usr/local"
for f in bin/quadwatch lib/libquadwatch.a include/quadwatch.h \
	lib/pkgconfig/quadwatch.pc lib/systemd/system/quadwatch.service \
	share/doc/quadwatch/example.ini share/doc/quadwatch/examples/embed.c \
	share/man/man1/quadwatch.1 share/man/man3/libquadwatch.3 \
	share/man/man5/quadwatch.ini.5; do
	[ -f "$p/$f" ] || fail "not installed: $f"
done
[ -x "$p/bin/quadwatch" ] || fail "bin/quadwatch not executable"
cmp -s src/core/quadwatch.h "$p/include/quadwatch.h" || fail "header differs"
grep -q '^ExecStart=/usr/local/bin/quadwatch run -c /usr/local/etc/quadwatch/quadwatch.ini$' \
	"$p/lib/systemd/system/quadwatch.service" || fail "unit ExecStart"

# man_check PAGE: renders (as lintian does) with nothing on stderr.
man_check() {
	LC_ALL=C.UTF-8 MANROFFSEQ='' MANWIDTH=80 \
		man --warnings -E UTF-8 -l -Tutf8 -Z "$1" >"$dir/man.out" \
		2>"$dir/man.err" || return 1
	[ -s "$dir/man.out" ] && [ ! -s "$dir/man.err" ]
}
pages=0
for src in docs/man/*.[135]; do
	sec=${src##*.}
	page="$p/share/man/man$sec/$(basename "$src")"
	[ -f "$page" ] || fail "man page not installed: $page"
	man_check "$page" || fail "man -l $page: $(cat "$dir/man.err")"
	pages=$((pages + 1))
done
# libquadwatch(3) keeps up with the header: every function declared in
# quadwatch.h has its line in the page's SYNOPSIS.
for f in $(sed -n 's/^[a-z].*[ *]\(qw_[a-z0-9_]*\)(.*/\1/p' src/core/quadwatch.h); do
	grep -q "^\.BI \".*[ *]$f(" docs/man/libquadwatch.3 ||
		fail "libquadwatch(3) lacks $f (declared in quadwatch.h)"
done
printf '.TH BAD 1\n.SH NAME\nbad \\- page\n.XY undefined macro\n' >"$dir/bad.1"
man_check "$dir/bad.1" && fail "a page with an undefined macro passed"

"$p/bin/quadwatch" check -q -c "$p/share/doc/quadwatch/example.ini" ||
	fail "installed quadwatch check on the installed example exited $?"

export PKG_CONFIG_PATH="$p/lib/pkgconfig" PKG_CONFIG_SYSROOT_DIR="$dest"
flags=$(pkg-config --cflags --libs quadwatch) || fail "pkg-config quadwatch"
case "$flags" in *"-I$p/include"*) ;; *) fail "cflags: $flags" ;; esac
# A sanitized build (make check-asan) installs instrumented objects.
san=${QW_SANITIZED:+-fsanitize=address,undefined}
# shellcheck disable=SC2086
${CC:-cc} $san -o "$dir/embed" "$p/share/doc/quadwatch/examples/embed.c" $flags \
	2>"$dir/cc.err" || fail "build against pkg-config: $(cat "$dir/cc.err")"
"$dir/embed" >"$dir/embed.out" || fail "installed example exited $?"
grep -A1 'alarm raised' "$dir/embed.out" | grep -q '1\. flow_m3h' ||
	fail "installed example: $(cat "$dir/embed.out")"
unset PKG_CONFIG_PATH PKG_CONFIG_SYSROOT_DIR

mk DESTDIR="$dest" uninstall >"$dir/log" 2>&1 ||
	{ cat "$dir/log"; fail "make uninstall exited $?"; }
left=$(find "$dest" ! -type d)
[ -z "$left" ] || fail "left after uninstall: $left"

# Another PREFIX: the unit follows it and is otherwise unchanged.
mk DESTDIR="$dest" PREFIX=/opt/qw install >"$dir/log" 2>&1 ||
	{ cat "$dir/log"; fail "make install PREFIX=/opt/qw exited $?"; }
unit="$dest/opt/qw/lib/systemd/system/quadwatch.service"
grep -q '^ExecStartPre=/opt/qw/bin/quadwatch check -c /opt/qw/etc/quadwatch/quadwatch.ini$' \
	"$unit" || fail "unit ExecStartPre under PREFIX=/opt/qw"
sed 's|/opt/qw/[a-z]*/quadwatch||g' "$unit" |
	grep -q '/usr/bin/quadwatch\|/etc/quadwatch' &&
	fail "unit keeps a path outside PREFIX=/opt/qw"
sed -e 's|/opt/qw/bin/quadwatch|/usr/bin/quadwatch|g' \
	-e 's|/opt/qw/etc/quadwatch|/etc/quadwatch|g' "$unit" |
	cmp -s - conf/quadwatch.service || fail "unit changed beyond its paths"
grep -q '^libdir=/opt/qw/lib$' "$dest/opt/qw/lib/pkgconfig/quadwatch.pc" ||
	fail "pkg-config libdir under PREFIX=/opt/qw"
mk DESTDIR="$dest" PREFIX=/opt/qw uninstall >/dev/null 2>&1
left=$(find "$dest" ! -type d)
[ -z "$left" ] || fail "left after uninstall PREFIX=/opt/qw: $left"
echo "# install: $pages man pages render clean; embed builds via pkg-config"
exit 0
