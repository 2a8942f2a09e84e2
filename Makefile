# nadir build. `make` builds build/libnadir.a and build/nadir.
# Every user-facing target first runs `deps`, which installs missing Debian
# packages (as root) or prints the exact command to run.

BUILD   ?= build
SAN     ?= 0
PREFIX  ?= /usr/local
CC      ?= cc
ifeq ($(CC),cc)
CC      := gcc
endif

PKGS    := openblas lapacke libcjson
WARN    := -Wall -Wextra -Werror -Wshadow -Wconversion -Wdouble-promotion \
           -Wstrict-prototypes -Wmissing-prototypes -Wno-sign-conversion
CFLAGS  ?= -O2 -g
CFLAGS  += -std=c11 -D_DEFAULT_SOURCE -fopenmp $(WARN) -I. \
           $(shell pkg-config --cflags $(PKGS) 2>/dev/null)
LDLIBS  := $(shell pkg-config --libs $(PKGS) 2>/dev/null) -lm
ifeq ($(SAN),1)
CFLAGS  += -fsanitize=address,undefined -fno-omit-frame-pointer -fno-sanitize-recover=all
LDFLAGS += -fsanitize=address,undefined
endif
LDFLAGS += -fopenmp

# Library modules, in link order (a module may use only those after it).
MODULES := conformers optimize potential core
SRC      = $(foreach m,$(MODULES),$(wildcard $(m)/*.c))
OBJ      = $(patsubst %.c,$(BUILD)/obj/%.o,$(SRC))
CLI_SRC  = $(wildcard cli/*.c)
CLI_OBJ  = $(patsubst %.c,$(BUILD)/obj/%.o,$(CLI_SRC))

# Module archives let one module's tests build while another is being edited.
# A test in tests/unit/M/ links lib M and everything M depends on.
DEPS_core       := core
DEPS_potential  := potential core
DEPS_optimize   := optimize core
DEPS_conformers := conformers optimize core
modlib = $(foreach d,$(DEPS_$(1)),$(BUILD)/lib$(d).a)

UNIT_SRC  = $(wildcard tests/unit/*/test_*.c)
UNIT_BIN  = $(patsubst tests/unit/%.c,$(BUILD)/tests/%,$(UNIT_SRC))
TESTLIB   = $(patsubst %.c,$(BUILD)/obj/%.o,$(wildcard tests/lib/*.c))

.PHONY: all deps test tests unit demo bench fuzz install clean check-deps dataset
.DEFAULT_GOAL := all
.SECONDARY:

all: deps
	@$(MAKE) --no-print-directory lib-and-cli

lib-and-cli: $(BUILD)/libnadir.a $(BUILD)/nadir $(BUILD)/xtb-single-point

# The compiled reference wrapper (tools/xtb_single_point.c): not library code.
$(BUILD)/xtb-single-point: tools/xtb_single_point.c
	@echo "  CC      $<"
	@$(CC) $(CFLAGS) $(LDFLAGS) -o $@ $< $(LDLIBS)

deps:
	@tools/deps.sh

$(BUILD)/obj/%.o: %.c
	@mkdir -p $(dir $@)
	@echo "  CC      $<"
	@$(CC) $(CFLAGS) -MMD -MP -c $< -o $@

define module_rule
$(BUILD)/lib$(1).a: $(patsubst %.c,$(BUILD)/obj/%.o,$(wildcard $(1)/*.c))
	@mkdir -p $$(dir $$@)
	rm -f $$@ && ar rcs $$@ $$^
endef
$(foreach m,$(MODULES),$(eval $(call module_rule,$(m))))

$(BUILD)/libnadir.a: $(OBJ)
	@mkdir -p $(dir $@)
	rm -f $@ && ar rcs $@ $^

$(BUILD)/nadir: $(CLI_OBJ) $(BUILD)/libnadir.a
	$(CC) $(LDFLAGS) -o $@ $^ $(LDLIBS)

# Unit tests: one binary per test file.
define unit_rule
$(BUILD)/tests/$(1)/%: tests/unit/$(1)/%.c $(TESTLIB) $(call modlib,$(1))
	@mkdir -p $$(dir $$@)
	@echo "  TEST    $$@"
	@$$(CC) $$(CFLAGS) -MMD -MP $$(shell pkg-config --cflags cmocka) -o $$@ $$< $(TESTLIB) \
	  $$(LDFLAGS) $(call modlib,$(1)) $$(LDLIBS) $$(shell pkg-config --libs cmocka)
endef
$(foreach m,core potential optimize conformers,$(eval $(call unit_rule,$(m))))

tests: $(UNIT_BIN) $(BUILD)/nadir $(BUILD)/xtb-single-point

# One module's unit tests only: make unit M=optimize
unit: deps
	@$(MAKE) --no-print-directory $(filter $(BUILD)/tests/$(M)/%,$(UNIT_BIN))
	@tests/run --only-unit --module $(M) $(BUILD)

# The full suite: optimised build, then the same suite under ASan+UBSan.
test: deps
	@$(MAKE) --no-print-directory tests BUILD=build
	@$(MAKE) --no-print-directory tests BUILD=build-san SAN=1
	@tests/run build build-san

demo: all
	@examples/run-demo.sh $(BUILD)/nadir

BENCH_SRC = $(wildcard bench/bench_*.c)
BENCH_BIN = $(patsubst bench/%.c,$(BUILD)/bench/%,$(BENCH_SRC))
$(BUILD)/bench/%: bench/%.c $(TESTLIB) $(BUILD)/libnadir.a
	@mkdir -p $(dir $@)
	@echo "  BENCH   $@"
	@$(CC) $(CFLAGS) $(shell pkg-config --cflags cmocka) -o $@ $< $(TESTLIB) $(LDFLAGS) $(BUILD)/libnadir.a $(LDLIBS) $(shell pkg-config --libs cmocka)

# One benchmark only: make bench B=bench_potential
bench: all
	@$(MAKE) --no-print-directory $(if $(B),$(BUILD)/bench/$(B),$(BENCH_BIN))
	@bench/run.sh $(BUILD) $(B)

fuzz: deps
	@tests/fuzz/run.sh

dataset: all
	@tools/make-dataset.sh

install: all
	install -d $(DESTDIR)$(PREFIX)/bin $(DESTDIR)$(PREFIX)/lib $(DESTDIR)$(PREFIX)/include/nadir \
	  $(DESTDIR)$(PREFIX)/share/nadir/models
	install -m 755 $(BUILD)/nadir $(DESTDIR)$(PREFIX)/bin/nadir
	install -m 644 $(BUILD)/libnadir.a $(DESTDIR)$(PREFIX)/lib/libnadir.a
	install -m 644 nadir.h $(DESTDIR)$(PREFIX)/include/nadir/nadir.h
	for d in core potential optimize conformers; do \
	  install -d $(DESTDIR)$(PREFIX)/include/nadir/$$d; \
	  install -m 644 $$d/*.h $(DESTDIR)$(PREFIX)/include/nadir/$$d/ 2>/dev/null || true; done
	-install -m 644 potential/models/* $(DESTDIR)$(PREFIX)/share/nadir/models/ 2>/dev/null

clean:
	rm -rf build build-san build-fuzz

-include $(shell find $(BUILD)/obj $(BUILD)/tests -name '*.d' 2>/dev/null)
