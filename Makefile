# stocktake -- plain Makefile. Libraries through pkg-config; libcsv ships no
# .pc file on Debian, so it is linked by name.
#
# Targets: all check demo bench bench-compare install clean deps (see DEVELOPERS.md)
#   make BUILD=dir      build into another folder (parallel work trees)
#   make SANITIZE=1     AddressSanitizer + UndefinedBehaviorSanitizer

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
  BUILD := $(BUILD)-san
endif

LIB_SRC  := $(sort $(filter-out src/cli/%,$(wildcard src/*/*.c)))
CLI_SRC  := $(sort $(wildcard src/cli/*.c))
TEST_SRC := $(sort $(wildcard tests/unit/test_*.c))

LIB_OBJ  := $(LIB_SRC:%.c=$(BUILD)/%.o)
CLI_OBJ  := $(CLI_SRC:%.c=$(BUILD)/%.o)
LIB      := $(BUILD)/libstocktake.a
BIN      := $(BUILD)/stocktake
TESTS    := $(TEST_SRC:tests/unit/%.c=$(BUILD)/tests/%)

.PHONY: all check unit e2e ref demo bench bench-compare deps install clean symbols

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

deps:
	@sh scripts/deps.sh

# Every exported symbol of the library carries the st_ prefix (names the
# compiler adds, such as the sanitizers' __asan_* or *.module_ctor, aside).
symbols: $(LIB)
	@bad=$$(nm -g --defined-only $(LIB) | awk 'NF==3 {print $$3}' | grep -v '^st_' | grep -v '^_' | grep -v '\.' || true); \
	if [ -n "$$bad" ]; then echo "symbols without st_ prefix:"; echo "$$bad"; exit 1; fi

unit: $(TESTS)
	@sh tests/run-unit.sh $(TESTS)

e2e: $(BIN)
	@STOCKTAKE=$(abspath $(BIN)) sh tests/e2e/run.sh

ref: $(BIN)
	@STOCKTAKE=$(abspath $(BIN)) sh tests/ref/run.sh

check: deps
	@$(MAKE) --no-print-directory all $(TESTS)
	@$(MAKE) --no-print-directory symbols unit e2e ref

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

install: $(BIN)
	install -d $(DESTDIR)$(PREFIX)/bin $(DESTDIR)$(PREFIX)/share/man/man1
	install -m 755 $(BIN) $(DESTDIR)$(PREFIX)/bin/stocktake
	install -m 644 docs/stocktake.1 $(DESTDIR)$(PREFIX)/share/man/man1/stocktake.1

clean:
	rm -rf build build-* out

-include $(LIB_OBJ:.o=.d) $(CLI_OBJ:.o=.d)
