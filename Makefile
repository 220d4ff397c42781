# quadwatch build.  One Makefile; see DEVELOPERS.md.
#   make            build the program and the core library
#   make check      install missing packages, build, run every test
#   make check-asan the same suite under AddressSanitizer + UBSan
#   make bench      per-reading cost and bus throughput (numbers, no verdicts)
#   make demo       the demo scenario end to end
#   make fuzz       libFuzzer harnesses, FUZZ_SECONDS each (default 60)

BUILD    ?= build
CC       ?= cc
PKGS     := libzmq gsl inih jansson
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

check: deps
	@$(MAKE) --no-print-directory tests
	@BUILD=$(BUILD) tests/run

check-asan: deps
	@$(MAKE) --no-print-directory BUILD=build-asan OPT=-O1 \
		SAN="-fsanitize=address,undefined -fno-omit-frame-pointer -fno-sanitize-recover=all" tests
	@BUILD=build-asan QW_SANITIZED=1 ASAN_OPTIONS=detect_leaks=1 \
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

clean:
	rm -rf build build-asan build-fuzz

-include $(shell find $(BUILD) -name '*.d' 2>/dev/null)
