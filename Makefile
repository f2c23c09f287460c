# stocktake -- plain Makefile. Libraries through pkg-config; libcsv ships no
# .pc file on Debian, so it is linked by name.
#
# Targets: all check demo bench bench-compare install clean deps (see DEVELOPERS.md),
#          fuzz valgrind (see docs/reliability.md)
#   make BUILD=dir      build into another folder (parallel work trees)
#   make SANITIZE=1     AddressSanitizer + UndefinedBehaviorSanitizer, into
#                       $(BUILD)-san; `make check SANITIZE=1` runs every test
#                       (unit, fuzz replay, e2e, ref) with those binaries
#   make fuzz           libFuzzer targets built with clang into build-fuzz/,
#                       each run FUZZ_SECONDS (default 30) seconds

CC       ?= cc
BUILD    ?= build
PREFIX   ?= /usr/local
SANITIZE ?= 0

PKGS     := geos proj sqlite3 libpcre2-8 shapelib yajl
PKG_CFLAGS = $(shell pkg-config --cflags $(PKGS) 2>/dev/null)
PKG_LIBS   = $(shell pkg-config --libs $(PKGS) 2>/dev/null) -lcsv -lpthread -lm

WARN     := -Wall -Wextra -Wshadow -Wstrict-prototypes -Wmissing-prototypes \
            -Wwrite-strings
CFLAGS   ?= -O2 -g
ALL_CFLAGS = -std=c11 -D_DEFAULT_SOURCE -D_POSIX_C_SOURCE=200809L -DPCRE2_CODE_UNIT_WIDTH=8 $(WARN) \
             $(CFLAGS) -Iinclude $(PKG_CFLAGS) -MMD -MP
ALL_LDFLAGS = $(LDFLAGS)
ifeq ($(SANITIZE),1)
  ALL_CFLAGS  += -fsanitize=address,undefined -fno-omit-frame-pointer -fno-sanitize-recover=undefined
  ALL_LDFLAGS += -fsanitize=address,undefined
  # 'override': a BUILD given on the command line gets the suffix too.
  override BUILD := $(BUILD)-san
  # Leaks are errors; suppressions only for code outside the project.
  export ASAN_OPTIONS := detect_leaks=1:abort_on_error=0:strict_string_checks=1
  export LSAN_OPTIONS := suppressions=$(abspath tests/lsan.supp):print_suppressions=0
  export UBSAN_OPTIONS := print_stacktrace=1:halt_on_error=1
endif

LIB_SRC  := $(sort $(filter-out src/cli/%,$(wildcard src/*/*.c)))
CLI_SRC  := $(sort $(wildcard src/cli/*.c))
TEST_SRC := $(sort $(wildcard tests/unit/test_*.c))

LIB_OBJ  := $(LIB_SRC:%.c=$(BUILD)/%.o)
CLI_OBJ  := $(CLI_SRC:%.c=$(BUILD)/%.o)
LIB      := $(BUILD)/libstocktake.a
BIN      := $(BUILD)/stocktake
TESTS    := $(TEST_SRC:tests/unit/%.c=$(BUILD)/tests/%)

# Fuzz targets: tests/fuzz/fuzz_<target>.c. Each is also linked with a
# plain driver (replay_<target>) that replays its corpus and the crashers
# of tests/data/crashers/<target>/ as part of `make check`.
FUZZ_TARGETS := $(sort $(patsubst tests/fuzz/fuzz_%.c,%,$(wildcard tests/fuzz/fuzz_*.c)))
REPLAYS  := $(FUZZ_TARGETS:%=$(BUILD)/fuzz/replay_%)
FUZZ_SECONDS ?= 30
FUZZ_CC  ?= clang
FUZZ_BUILD ?= build-fuzz

.PHONY: all check unit replay e2e ref demo bench bench-compare bench-tiles deps install clean symbols \
        fuzz fuzz-bins valgrind

all: $(BIN)

$(BUILD)/%.o: %.c
	@mkdir -p $(dir $@)
	$(CC) $(ALL_CFLAGS) -c $< -o $@

$(LIB): $(LIB_OBJ)
	@mkdir -p $(dir $@)
	rm -f $@ && ar rcs $@ $^

$(BIN): $(CLI_OBJ) $(LIB)
	$(CC) $(ALL_LDFLAGS) -o $@ $(CLI_OBJ) $(LIB) $(PKG_LIBS)

$(BUILD)/tests/%: tests/unit/%.c $(LIB)
	@mkdir -p $(dir $@)
	$(CC) $(ALL_CFLAGS) -Isrc $(ALL_LDFLAGS) -o $@ $< $(LIB) $(PKG_LIBS) -lcmocka

$(BUILD)/fuzz/replay_%: tests/fuzz/fuzz_%.c tests/fuzz/fuzz.h $(BUILD)/tests/fuzz/replay.o $(LIB)
	@mkdir -p $(dir $@)
	$(CC) $(ALL_CFLAGS) -Isrc $(ALL_LDFLAGS) -o $@ $< $(BUILD)/tests/fuzz/replay.o $(LIB) $(PKG_LIBS)

# libFuzzer binaries; only built by `make fuzz`, in its own BUILD.
$(BUILD)/fuzz/fuzz_%: tests/fuzz/fuzz_%.c tests/fuzz/fuzz.h $(LIB)
	@mkdir -p $(dir $@)
	$(CC) $(ALL_CFLAGS) -Isrc -fsanitize=fuzzer $(ALL_LDFLAGS) -o $@ $< $(LIB) $(PKG_LIBS)

fuzz-bins: $(FUZZ_TARGETS:%=$(BUILD)/fuzz/fuzz_%)

# Keep the driver's object between builds (make would delete it as an
# intermediate file of a chain of pattern rules).
.SECONDARY: $(BUILD)/tests/fuzz/replay.o

deps:
	@sh scripts/deps.sh

# Every exported symbol of the library carries the st_ prefix (names the
# compiler adds, such as the sanitizers' __asan_* or *.module_ctor, aside).
symbols: $(LIB)
	@bad=$$(nm -g --defined-only $(LIB) | awk 'NF==3 {print $$3}' | grep -v '^st_' | grep -v '^_' | grep -v '\.' || true); \
	if [ -n "$$bad" ]; then echo "symbols without st_ prefix:"; echo "$$bad"; exit 1; fi

unit: $(TESTS)
	@sh tests/run-unit.sh $(TESTS)

replay: $(REPLAYS)
	@sh tests/fuzz/replay.sh $(BUILD)/fuzz $(FUZZ_TARGETS)

e2e: $(BIN)
	@STOCKTAKE=$(abspath $(BIN)) sh tests/e2e/run.sh

ref: $(BIN)
	@STOCKTAKE=$(abspath $(BIN)) sh tests/ref/run.sh

check: deps
	@$(MAKE) --no-print-directory all $(TESTS) $(REPLAYS)
	@$(MAKE) --no-print-directory symbols unit replay e2e ref

# The library and harnesses built with clang, libFuzzer, ASan and UBSan;
# then each target runs FUZZ_SECONDS seconds (tests/fuzz/run.sh).
fuzz: deps
	@sh scripts/deps.sh fuzz
	@$(MAKE) --no-print-directory BUILD=$(FUZZ_BUILD) SANITIZE=0 CC=$(FUZZ_CC) \
	    CFLAGS="-O1 -g -fno-omit-frame-pointer -fsanitize=fuzzer-no-link,address,undefined -fno-sanitize-recover=undefined" \
	    LDFLAGS="-fsanitize=address,undefined" fuzz-bins
	@FUZZ_SECONDS=$(FUZZ_SECONDS) sh tests/fuzz/run.sh $(FUZZ_BUILD) $(FUZZ_TARGETS)

# The demo (or, until it exists, a run on tests/data) under valgrind: any
# memory error or leak fails.
valgrind: deps
	@$(MAKE) --no-print-directory all
	@STOCKTAKE=$(abspath $(BIN)) sh tests/valgrind.sh

demo: deps
	@$(MAKE) --no-print-directory all
	@STOCKTAKE=$(abspath $(BIN)) sh scripts/demo.sh

# The floor of the geometry stage (bench/floor.c): not part of the library.
FLOOR := $(BUILD)/bench/floor
$(FLOOR): bench/floor.c
	@mkdir -p $(dir $@)
	$(CC) $(ALL_CFLAGS) $(ALL_LDFLAGS) -o $@ $< $(PKG_LIBS)

# Benchmarks are never part of check or CI.
bench: deps
	@$(MAKE) --no-print-directory all $(FLOOR)
	@STOCKTAKE=$(abspath $(BIN)) FLOOR=$(abspath $(FLOOR)) sh bench/run.sh

# stocktake against bench/peer.py (geopandas) on the same files, same session.
bench-compare: deps
	@$(MAKE) --no-print-directory all
	@STOCKTAKE=$(abspath $(BIN)) sh bench/compare.sh

# Splitting a job into windows: 1, 2, 4, 16 parts and the merge (docs/scale.md).
bench-tiles: deps
	@$(MAKE) --no-print-directory all
	@STOCKTAKE=$(abspath $(BIN)) sh bench/tiles.sh

install: $(BIN)
	install -d $(DESTDIR)$(PREFIX)/bin $(DESTDIR)$(PREFIX)/share/man/man1
	install -m 755 $(BIN) $(DESTDIR)$(PREFIX)/bin/stocktake
	install -m 644 docs/stocktake.1 $(DESTDIR)$(PREFIX)/share/man/man1/stocktake.1

clean:
	rm -rf build build-* out

-include $(LIB_OBJ:.o=.d) $(CLI_OBJ:.o=.d)
