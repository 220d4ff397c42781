# quadwatch build.  One Makefile; see DEVELOPERS.md.
#   make            build the program and the core library
#   make check      install missing packages, build, run every test
#   make check-asan the same suite under AddressSanitizer + UBSan
#   make bench      per-reading cost and bus throughput (numbers, no verdicts)
#   make demo       the demo scenario end to end
#   make fuzz       libFuzzer harnesses, FUZZ_SECONDS each (default 60)

BUILD    ?= build
CC       ?= cc
PKGS     := libzmq gsl inih jansson libmosquitto
WARN     := -Wall -Wextra -Wshadow -Wconversion -Wstrict-prototypes \
            -Wmissing-prototypes -Wformat=2
# CI builds with warnings as errors; WERROR=0 to relax locally.
WERROR   ?= $(if $(CI),1,0)
ifeq ($(WERROR),1)
WARN     += -Werror
endif
OPT      ?= -O2
# The core's inner loops are plain C written to vectorise; the dynamic cost
# model lets GCC's -O2 vectoriser take loops with run-time trip counts.
CORE_OPT ?= -ftree-loop-vectorize -fvect-cost-model=dynamic
SAN      ?=
CFLAGS   ?= $(OPT) -g
ALL_CFLAGS = -std=c11 -D_DEFAULT_SOURCE -D_POSIX_C_SOURCE=200809L $(WARN) \
            $(CFLAGS) $(SAN) -Isrc/core -Isrc/io -MMD -MP \
            $(shell pkg-config --cflags $(PKGS) 2>/dev/null)
LDLIBS   = $(shell pkg-config --libs $(PKGS) 2>/dev/null) -lcsv -lm
LDFLAGS  += $(SAN)

CORE_SRC := $(wildcard src/core/*.c)
IO_SRC   := $(wildcard src/io/*.c)
CMD_SRC  := $(wildcard src/cmd/*.c)
TEST_SRC := $(wildcard tests/test_*.c tests/helper_*.c)
BENCH_SRC:= $(wildcard tools/bench_*.c)

CORE_OBJ := $(CORE_SRC:%.c=$(BUILD)/%.o)
IO_OBJ   := $(IO_SRC:%.c=$(BUILD)/%.o)
CMD_OBJ  := $(CMD_SRC:%.c=$(BUILD)/%.o)
TEST_BIN := $(TEST_SRC:tests/%.c=$(BUILD)/tests/%)
BENCH_BIN:= $(BENCH_SRC:tools/%.c=$(BUILD)/tools/%)

LIBCORE  := $(BUILD)/libquadwatch.a
LIBIO    := $(BUILD)/libqwio.a
PROG     := $(BUILD)/quadwatch

.PHONY: all deps check check-asan check-valgrind bench demo fuzz clean tests
all: $(PROG) $(LIBCORE)

deps:
	@tools/install-deps

$(BUILD)/src/core/%.o: src/core/%.c
	@mkdir -p $(@D)
	$(CC) $(ALL_CFLAGS) $(CORE_OPT) -c -o $@ $<

# sweep.c vectorises by hand (GCC vector types); the auto-vectoriser would
# pack its scalar pivot chain into shuffles that lengthen the chain.
$(BUILD)/src/core/sweep.o: CORE_OPT = -fno-tree-vectorize

$(BUILD)/%.o: %.c
	@mkdir -p $(@D)
	$(CC) $(ALL_CFLAGS) -c -o $@ $<

$(LIBCORE): $(CORE_OBJ)
	@rm -f $@
	ar rcs $@ $^

$(LIBIO): $(IO_OBJ)
	@rm -f $@
	ar rcs $@ $^

$(PROG): $(CMD_OBJ) $(LIBIO) $(LIBCORE)
	$(CC) $(LDFLAGS) -o $@ $(CMD_OBJ) $(LIBIO) $(LIBCORE) $(LDLIBS)

# Tests link both libraries and cmocka; the program is built too since the
# end-to-end tests drive it.
$(BUILD)/tests/%: tests/%.c $(LIBIO) $(LIBCORE)
	@mkdir -p $(@D)
	$(CC) $(ALL_CFLAGS) -Itests $(LDFLAGS) -o $@ $< $(LIBIO) $(LIBCORE) \
		$(LDLIBS) -lcmocka

$(BUILD)/tools/%: tools/%.c $(LIBIO) $(LIBCORE)
	@mkdir -p $(@D)
	$(CC) $(ALL_CFLAGS) $(CORE_OPT) $(LDFLAGS) -o $@ $< $(LIBIO) $(LIBCORE) $(LDLIBS)

tests: $(PROG) $(TEST_BIN)

# The embedding example (docs/examples/*.c) links the core library and GSL
# only, as an acquisition program would; the tests build and run it.
EXAMPLE_SRC := $(wildcard docs/examples/*.c)
EXAMPLE_BIN := $(EXAMPLE_SRC:docs/examples/%.c=$(BUILD)/examples/%)
$(BUILD)/examples/%: docs/examples/%.c $(LIBCORE)
	@mkdir -p $(@D)
	$(CC) $(ALL_CFLAGS) $(LDFLAGS) -o $@ $< $(LIBCORE) \
		$(shell pkg-config --libs gsl 2>/dev/null) -lm
tests: $(EXAMPLE_BIN)

check: deps
	@$(MAKE) --no-print-directory tests
	@BUILD=$(BUILD) tests/run

ASAN_SAN := -fsanitize=address,undefined -fno-omit-frame-pointer -fno-sanitize-recover=all
check-asan: deps
	@$(MAKE) --no-print-directory BUILD=build-asan OPT=-O1 SAN="$(ASAN_SAN)" tests
	@BUILD=build-asan QW_SANITIZED=1 QW_SAN_FLAGS="$(ASAN_SAN)" ASAN_OPTIONS=detect_leaks=1 \
		UBSAN_OPTIONS=print_stacktrace=1:halt_on_error=1 tests/run

# The end-to-end tests whose daemons run under valgrind (memcheck, leaks).
VALGRIND_TESTS ?= t_run_alert t_run_badinput t_run_control t_run_reload
check-valgrind: deps
	@$(MAKE) --no-print-directory tests
	@BUILD=$(BUILD) QW_VALGRIND=1 QW_VALGRIND_TESTS="$(VALGRIND_TESTS)" tests/run

bench: deps
	@$(MAKE) --no-print-directory $(PROG) $(BENCH_BIN)
	@BUILD=$(BUILD) tools/bench

demo: deps
	@$(MAKE) --no-print-directory $(PROG)
	@BUILD=$(BUILD) tools/demo

FUZZ_SECONDS ?= 60
fuzz: deps
	@FUZZ_SECONDS=$(FUZZ_SECONDS) tools/fuzz

# make install [PREFIX=/usr/local] [DESTDIR=...]: the program, the core
# library with its header and pkg-config file, the man pages, the example
# configuration and the embedding example (DOCDIR), and the systemd unit.
# The unit and the pkg-config file get the installed paths substituted here.
PREFIX     ?= /usr/local
BINDIR     ?= $(PREFIX)/bin
LIBDIR     ?= $(PREFIX)/lib
INCLUDEDIR ?= $(PREFIX)/include
MANDIR     ?= $(PREFIX)/share/man
DOCDIR     ?= $(PREFIX)/share/doc/quadwatch
# /etc for PREFIX=/usr (a distribution package), else PREFIX/etc.
SYSCONFDIR ?= $(if $(filter /usr,$(PREFIX)),/etc,$(PREFIX)/etc)
UNITDIR    ?= $(PREFIX)/lib/systemd/system
PKGCONFIGDIR ?= $(LIBDIR)/pkgconfig
INSTALL    ?= install
VERSION    ?= 0.1.0
MAN_PAGES  := $(wildcard docs/man/*.[135])
GEN        := $(BUILD)/install

.PHONY: install uninstall
install: $(PROG) $(LIBCORE)
	@mkdir -p $(GEN)
	sed -e 's|@PREFIX@|$(PREFIX)|g' -e 's|@LIBDIR@|$(LIBDIR)|g' \
		-e 's|@INCLUDEDIR@|$(INCLUDEDIR)|g' -e 's|@VERSION@|$(VERSION)|g' \
		conf/quadwatch.pc.in >$(GEN)/quadwatch.pc
	sed -e 's|/usr/bin/quadwatch|$(BINDIR)/quadwatch|g' \
		-e 's|/etc/quadwatch|$(SYSCONFDIR)/quadwatch|g' \
		conf/quadwatch.service >$(GEN)/quadwatch.service
	$(INSTALL) -d $(DESTDIR)$(BINDIR) $(DESTDIR)$(LIBDIR) \
		$(DESTDIR)$(INCLUDEDIR) $(DESTDIR)$(PKGCONFIGDIR) \
		$(DESTDIR)$(MANDIR)/man1 $(DESTDIR)$(MANDIR)/man3 \
		$(DESTDIR)$(MANDIR)/man5 $(DESTDIR)$(DOCDIR)/examples \
		$(DESTDIR)$(UNITDIR)
	$(INSTALL) -m 755 $(PROG) $(DESTDIR)$(BINDIR)/quadwatch
	$(INSTALL) -m 644 $(LIBCORE) $(DESTDIR)$(LIBDIR)/libquadwatch.a
	$(INSTALL) -m 644 src/core/quadwatch.h $(DESTDIR)$(INCLUDEDIR)/quadwatch.h
	$(INSTALL) -m 644 $(GEN)/quadwatch.pc $(DESTDIR)$(PKGCONFIGDIR)/quadwatch.pc
	$(INSTALL) -m 644 $(filter %.1,$(MAN_PAGES)) $(DESTDIR)$(MANDIR)/man1
	$(INSTALL) -m 644 $(filter %.3,$(MAN_PAGES)) $(DESTDIR)$(MANDIR)/man3
	$(INSTALL) -m 644 $(filter %.5,$(MAN_PAGES)) $(DESTDIR)$(MANDIR)/man5
	$(INSTALL) -m 644 conf/example.ini $(DESTDIR)$(DOCDIR)/example.ini
	$(INSTALL) -m 644 $(EXAMPLE_SRC) $(DESTDIR)$(DOCDIR)/examples
	$(INSTALL) -m 644 $(GEN)/quadwatch.service \
		$(DESTDIR)$(UNITDIR)/quadwatch.service

uninstall:
	rm -f $(DESTDIR)$(BINDIR)/quadwatch $(DESTDIR)$(LIBDIR)/libquadwatch.a \
		$(DESTDIR)$(INCLUDEDIR)/quadwatch.h \
		$(DESTDIR)$(PKGCONFIGDIR)/quadwatch.pc \
		$(DESTDIR)$(UNITDIR)/quadwatch.service \
		$(DESTDIR)$(DOCDIR)/example.ini \
		$(addprefix $(DESTDIR)$(DOCDIR)/examples/,$(notdir $(EXAMPLE_SRC))) \
		$(foreach m,$(MAN_PAGES),$(DESTDIR)$(MANDIR)/man$(subst .,,$(suffix $(m)))/$(notdir $(m)))
	rmdir $(DESTDIR)$(DOCDIR)/examples $(DESTDIR)$(DOCDIR) 2>/dev/null || true

clean:
	rm -rf build build-asan build-fuzz

-include $(shell find $(BUILD) -name '*.d' 2>/dev/null)
