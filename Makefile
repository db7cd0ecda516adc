# abtally — one non-recursive Makefile.
#   make            build build/abtally
#   make test       unit tests (cmocka) + command-line tests; needs no network
#   make demo       the main job end to end on invented data
#   make asan       the test suite under AddressSanitizer + UndefinedBehaviorSanitizer
#   make valgrind   replay, check and merge under valgrind memcheck (tests/valgrind.sh)
#   make fuzz       libFuzzer harnesses (fuzz/), FUZZ_SECONDS each (default 60)
#   make bench      performance figures (bench/README.md); BENCH_UNITS, BENCH_RUNS
#   make install PREFIX=/usr/local
# V=1 shows the compiler lines.

PREFIX   ?= /usr/local
BUILD    ?= build
CC       ?= cc
CXX      ?= c++
PKGS     := jansson gsl rdkafka zlib libcrypto simdjson
PKG_CFLAGS := $(shell pkg-config --cflags $(PKGS) 2>/dev/null)
PKG_LIBS   := $(shell pkg-config --libs $(PKGS) 2>/dev/null)
OPT      ?= -O2 -g
CFLAGS   ?= $(OPT)
CFLAGS   += -std=c11 -D_GNU_SOURCE -Wall -Wextra -Werror -Iinclude $(PKG_CFLAGS) $(SAN)
CXXFLAGS ?= $(OPT)
CXXFLAGS += -std=c++17 -Wall -Wextra -Werror -Iinclude $(PKG_CFLAGS) $(SAN)
LDLIBS   += $(PKG_LIBS) -lm -lpthread
LDFLAGS  += $(SAN)

ifeq ($(V),1)
Q :=
else
Q := @
endif

MAIN_SRC := src/main.c
CORE_C   := $(filter-out $(MAIN_SRC),$(wildcard src/*.c))
CORE_CXX := $(wildcard src/*.cc)
CORE_OBJ := $(CORE_C:src/%.c=$(BUILD)/obj/%.o) $(CORE_CXX:src/%.cc=$(BUILD)/obj/%.o)
TEST_SRC := $(wildcard tests/test_*.c)
TEST_BIN := $(TEST_SRC:tests/%.c=$(BUILD)/tests/%)
DEPS_OK  := $(BUILD)/.deps-ok

ifneq ($(CORE_CXX),)
LINK := $(CXX)
else
LINK := $(CC)
endif

.PHONY: all test unit cli demo asan valgrind clean install deps check-layering sim bench fuzz fuzz-bins fuzz-seeds
all: $(BUILD)/abtally

# Install the Debian packages the build needs, once per build tree.
$(DEPS_OK): deploy/install-deps.sh
	$(Q)mkdir -p $(BUILD)
	$(Q)sh deploy/install-deps.sh
	$(Q)touch $@
deps: $(DEPS_OK)

$(BUILD)/obj/%.o: src/%.c | $(DEPS_OK)
	@mkdir -p $(dir $@)
	@$(if $(Q),echo "  CC      $<")
	$(Q)$(CC) $(CFLAGS) -MMD -MP -c $< -o $@

$(BUILD)/obj/%.o: src/%.cc | $(DEPS_OK)
	@mkdir -p $(dir $@)
	@$(if $(Q),echo "  CXX     $<")
	$(Q)$(CXX) $(CXXFLAGS) -MMD -MP -c $< -o $@

$(BUILD)/libcore.a: $(CORE_OBJ)
	$(Q)rm -f $@ && ar rcs $@ $^

$(BUILD)/abtally: $(BUILD)/obj/main.o $(BUILD)/libcore.a
	@$(if $(Q),echo "  LINK    $@")
	$(Q)$(LINK) $(LDFLAGS) -o $@ $^ $(LDLIBS)

$(BUILD)/tests/%: tests/%.c tests/helpers.h $(BUILD)/libcore.a | $(DEPS_OK)
	@mkdir -p $(dir $@)
	@$(if $(Q),echo "  TEST    $<")
	$(Q)$(LINK) $(CFLAGS) $(if $(filter $(LINK),$(CXX)),-x c) $< -x none -o $@ $(BUILD)/libcore.a $(LDFLAGS) $(LDLIBS) $(shell pkg-config --libs cmocka)

# The test runner prints cmocka's summary per binary and one closing line
# "tests: N passed, M failed" over unit and command-line tests.
test: $(BUILD)/abtally $(TEST_BIN)
	$(Q)sh tests/run.sh $(BUILD)

# The performance benchmark (bench/README.md): builds what it needs, then
# bench/run.sh generates a log with 'abtally simulate' (cached in
# $(BUILD)/bench/) and prints one "name value unit" line per figure.
# BENCH_UNITS (default 2000000 units, about 18M lines) and BENCH_RUNS
# (default 3) size it.
BENCH_BIN := $(addprefix $(BUILD)/bench/,parse_floor runstat bounds_time consume_floor randmem)
bench: $(BUILD)/abtally $(BENCH_BIN)
	$(Q)sh bench/run.sh $(BUILD)

$(BUILD)/bench/parse_floor: tests/bytebuf.h
$(BUILD)/bench/%: bench/%.c $(BUILD)/libcore.a | $(DEPS_OK)
	@mkdir -p $(dir $@)
	@$(if $(Q),echo "  BENCH   $<")
	$(Q)$(LINK) $(CFLAGS) $(if $(filter $(LINK),$(CXX)),-x c) $< -x none -o $@ $(BUILD)/libcore.a $(LDFLAGS) $(LDLIBS)

# The sequential-testing simulations with ten times the streams of make test
# (20,000 streams per scenario; about ten seconds).
sim: $(BUILD)/tests/test_seq
	$(Q)ABTALLY_SIM_HEAVY=1 $(BUILD)/tests/test_seq

check-layering:
	$(Q)sh tests/check-layering.sh

asan:
	$(Q)$(MAKE) BUILD=build-asan OPT="-O1 -g -fno-omit-frame-pointer" \
	  SAN="-fsanitize=address,undefined -fno-sanitize-recover=all" test

valgrind: $(BUILD)/abtally
	$(Q)sh tests/valgrind.sh $(BUILD)

# Fuzzing with clang's libFuzzer, AddressSanitizer and UBSan: the core is
# compiled again with clang into build-fuzz/ (coverage-instrumented; clang's
# warnings do not stop this build, the gcc build is the one held to -Werror),
# each fuzz/fuzz_*.c harness is linked against it, and fuzz/run.sh runs every
# harness for FUZZ_SECONDS seconds on its seeds in fixtures/fuzz/<target>/,
# failing on any crash, leak, timeout or sanitizer report.
# `make fuzz-seeds` regenerates the generated seeds (see fuzz/make_seeds.c).
FUZZ_SECONDS ?= 60
FUZZ_BUILD   := build-fuzz
FUZZ_TARGETS := $(patsubst fuzz/%.c,%,$(wildcard fuzz/fuzz_*.c))
fuzz:
	$(Q)$(MAKE) --no-print-directory BUILD=$(FUZZ_BUILD) CC=clang CXX=clang++ \
	  OPT="-O1 -g -fno-omit-frame-pointer" \
	  SAN="-fsanitize=fuzzer-no-link,address,undefined -fno-sanitize-recover=all -Wno-error" fuzz-bins
	$(Q)FUZZ_SECONDS=$(FUZZ_SECONDS) sh fuzz/run.sh $(FUZZ_BUILD) $(FUZZ_TARGETS)

fuzz-bins: $(FUZZ_TARGETS:%=$(BUILD)/%)
$(BUILD)/fuzz_%: fuzz/fuzz_%.c fuzz/fuzz_common.h tests/bytebuf.h $(BUILD)/libcore.a
	@mkdir -p $(BUILD)/fuzzobj
	@$(if $(Q),echo "  FUZZ    $<")
	$(Q)$(CC) $(CFLAGS) -Ifuzz -c $< -o $(BUILD)/fuzzobj/$*.o
	$(Q)$(LINK) $(LDFLAGS) -fsanitize=fuzzer -o $@ $(BUILD)/fuzzobj/$*.o $(BUILD)/libcore.a $(LDLIBS)

fuzz-seeds: $(BUILD)/libcore.a
	@mkdir -p $(BUILD)/fuzzobj
	$(Q)$(CC) $(CFLAGS) -Ifuzz -c fuzz/make_seeds.c -o $(BUILD)/fuzzobj/make_seeds.o
	$(Q)$(LINK) $(LDFLAGS) -o $(BUILD)/make_seeds $(BUILD)/fuzzobj/make_seeds.o $(BUILD)/libcore.a $(LDLIBS)
	$(Q)rm -rf fixtures/fuzz/snapshot fixtures/fuzz/state
	$(Q)$(BUILD)/make_seeds fixtures/fuzz

demo: $(BUILD)/abtally
	$(Q)sh deploy/demo.sh $(BUILD)

install: $(BUILD)/abtally
	install -d $(DESTDIR)$(PREFIX)/bin $(DESTDIR)$(PREFIX)/share/man/man1
	install -m 0755 $(BUILD)/abtally $(DESTDIR)$(PREFIX)/bin/abtally
	if [ -f doc/abtally.1 ]; then install -m 0644 doc/abtally.1 $(DESTDIR)$(PREFIX)/share/man/man1/abtally.1; fi

clean:
	rm -rf build build-asan build-fuzz

-include $(CORE_OBJ:.o=.d) $(BUILD)/obj/main.d
