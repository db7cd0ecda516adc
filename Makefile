# abtally — one non-recursive Makefile.
#   make            build build/abtally
#   make test       unit tests (cmocka) + command-line tests; needs no network
#   make demo       the main job end to end on invented data
#   make asan       the test suite under AddressSanitizer + UndefinedBehaviorSanitizer
#   make install PREFIX=/usr/local
# V=1 shows the compiler lines.

PREFIX   ?= /usr/local
BUILD    ?= build
CC       ?= cc
CXX      ?= c++
PKGS     := jansson gsl rdkafka zlib libcrypto
PKG_CFLAGS := $(shell pkg-config --cflags $(PKGS) 2>/dev/null)
PKG_LIBS   := $(shell pkg-config --libs $(PKGS) 2>/dev/null)
OPT      ?= -O2 -g
CFLAGS   ?= $(OPT)
CFLAGS   += -std=c11 -D_GNU_SOURCE -Wall -Wextra -Werror -Iinclude $(PKG_CFLAGS) $(SAN)
CXXFLAGS ?= $(OPT)
CXXFLAGS += -std=c++17 -Wall -Wextra -Werror -Iinclude $(SAN)
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

.PHONY: all test unit cli demo asan valgrind clean install deps check-layering sim bench fuzz
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

demo: $(BUILD)/abtally
	$(Q)sh deploy/demo.sh $(BUILD)

install: $(BUILD)/abtally
	install -d $(DESTDIR)$(PREFIX)/bin $(DESTDIR)$(PREFIX)/share/man/man1
	install -m 0755 $(BUILD)/abtally $(DESTDIR)$(PREFIX)/bin/abtally
	if [ -f doc/abtally.1 ]; then install -m 0644 doc/abtally.1 $(DESTDIR)$(PREFIX)/share/man/man1/abtally.1; fi

clean:
	rm -rf build build-asan build-fuzz

-include $(CORE_OBJ:.o=.d) $(BUILD)/obj/main.d
