# vfcoach — one Makefile for the program, its tests, sanitiser variants and benchmarks.
#
#   make            build build/release/vfcoach
#   make run        build, then start the coach (first camera, else the demo scene)
#   make check      build and run every test (cmocka + reference-library scripts)
#   make asan       address + undefined-behaviour build in build/asan, its tests run too
#   make tsan       thread-sanitiser build in build/tsan, its tests run too
#   make bench      speed benchmark against the OpenCV reference
#   make check-vm   real-driver test: vivid virtual camera in a qemu guest
#   make install    install program and udev rule (PREFIX, DESTDIR honoured)
#   make deps       install the Debian packages the build and the tests need
#
# Variants keep their objects apart (build/<variant>/...), so switching never
# needs a clean.  WERROR=1 turns warnings into errors (CI sets it).

VARIANT ?= release
PREFIX  ?= /usr/local
DESTDIR ?=
CC      ?= cc
PYTHON  ?= /usr/bin/python3

PKGS := libv4l2 libv4lconvert sdl2 SDL2_ttf SDL2_image libudev fontconfig
TEST_PKGS := cmocka

# Debian packages behind the pkg-config names above, and what the tests and
# the VM check use.  `make deps` installs whatever is missing.
DEB_BUILD := build-essential pkg-config libv4l-dev libsdl2-dev libsdl2-ttf-dev \
             libsdl2-image-dev libudev-dev libfontconfig-dev libcmocka-dev \
             fonts-dejavu-core
DEB_TEST  := python3 python3-numpy python3-opencv python3-skimage opencv-doc \
             xvfb x11-apps imagemagick
DEB_VM    := qemu-system-x86 busybox-static v4l-utils kmod cpio
DEB_ALL   := $(DEB_BUILD) $(DEB_TEST) $(DEB_VM)

WARN := -Wall -Wextra -Wshadow -Wundef -Wvla -Wpointer-arith \
        -Wmissing-prototypes -Wstrict-prototypes -Werror=implicit-function-declaration
ifeq ($(WERROR),1)
WARN += -Werror
endif

OPT_release := -O2 -g
OPT_debug   := -O0 -g3
OPT_asan    := -O1 -g -fsanitize=address,undefined -fno-omit-frame-pointer -fno-sanitize-recover=undefined
OPT_tsan    := -O1 -g -fsanitize=thread
OPT_bench   := -O3 -march=x86-64-v2 -g

PKG_CFLAGS := $(shell pkg-config --cflags $(PKGS) 2>/dev/null)
PKG_LIBS   := $(shell pkg-config --libs $(PKGS) 2>/dev/null)
TEST_CFLAGS := $(shell pkg-config --cflags $(TEST_PKGS) 2>/dev/null)
TEST_LIBS   := $(shell pkg-config --libs $(TEST_PKGS) 2>/dev/null)
# Per-test link flags.  test_coach counts every allocation the library makes
# (zero per frame in steady state): the allocators are wrapped at link time.
LDLIBS_test_coach := -Wl,--wrap=malloc,--wrap=calloc,--wrap=realloc,--wrap=aligned_alloc,--wrap=posix_memalign

CFLAGS_ALL := -std=c11 -D_GNU_SOURCE -I. $(WARN) $(OPT_$(VARIANT)) $(PKG_CFLAGS) $(CFLAGS)
LDFLAGS_ALL := $(OPT_$(VARIANT)) $(LDFLAGS)
LIBS_ALL := $(PKG_LIBS) -lpthread -lm

# Each variant builds in $(BUILDROOT)/<variant>.  BUILDROOT=build/mine keeps
# a second set of builds apart (parallel work in one tree).
BUILDROOT ?= build
BUILDDIR ?= $(BUILDROOT)/$(VARIANT)
B := $(BUILDDIR)

# coach/ holds the pure library (coach_*) and the program (app_*.c, main.c);
# the program files are the only ones there allowed to do I/O.
APP_SRC     := coach/main.c $(wildcard coach/app_*.c)
COACH_SRC   := $(filter-out $(APP_SRC),$(wildcard coach/*.c))
CAPTURE_SRC := $(wildcard capture/*.c)
OVERLAY_SRC := $(wildcard overlay/*.c)
LIB_SRC     := $(COACH_SRC) $(CAPTURE_SRC) $(OVERLAY_SRC) $(filter-out coach/main.c,$(APP_SRC))
LIB_OBJ     := $(LIB_SRC:%.c=$(B)/%.o)
MAIN_OBJ    := $(B)/coach/main.o
TEST_SRC    := $(wildcard tests/test_*.c)
TEST_BIN    := $(TEST_SRC:tests/%.c=$(B)/tests/%)
TEST_SCRIPTS := $(sort $(wildcard tests/check_*.sh))

PROG := $(B)/vfcoach

.PHONY: all run check check-unit check-scripts asan tsan bench install uninstall deps \
        check-vm clean purity
.DEFAULT_GOAL := all

all: $(PROG)

$(PROG): $(LIB_OBJ) $(MAIN_OBJ)
	$(CC) $(LDFLAGS_ALL) -o $@ $^ $(LIBS_ALL)

$(B)/%.o: %.c
	@mkdir -p $(@D)
	$(CC) $(CFLAGS_ALL) -MMD -MP -c -o $@ $<

$(B)/tests/test_%: $(B)/tests/test_%.o $(LIB_OBJ)
	$(CC) $(LDFLAGS_ALL) -o $@ $^ $(LIBS_ALL) $(TEST_LIBS) $(LDLIBS_test_$*)

$(B)/tests/%.o: CFLAGS_ALL += $(TEST_CFLAGS)

-include $(shell find $(B) -name '*.d' 2>/dev/null)

# --- dependencies ----------------------------------------------------------
# Quiet and quick when everything is installed: one dpkg-query.
DEPS_OK := $(shell dpkg-query -W -f='$${db:Status-Abbrev}\n' $(DEB_ALL) 2>/dev/null | grep -c '^ii')
deps:
	@missing=$$(for p in $(DEB_ALL); do dpkg-query -W -f='$${db:Status-Abbrev}' $$p 2>/dev/null | grep -q '^ii' || echo $$p; done); \
	if [ -n "$$missing" ]; then \
	  SUDO=; [ "$$(id -u)" = 0 ] || SUDO=sudo; \
	  echo "deps: installing:" $$missing; \
	  $$SUDO apt-get update -q >/dev/null && \
	  DEBIAN_FRONTEND=noninteractive $$SUDO apt-get install -y -q --no-install-recommends $$missing >/dev/null || \
	  { echo "deps: apt-get install failed for:" $$missing >&2; exit 1; }; \
	fi

# make run / make check install what is missing first (nothing when present).
NEED_DEPS := $(if $(filter $(words $(DEB_ALL)),$(DEPS_OK)),,deps)

# --- run -------------------------------------------------------------------
RUN_ARGS ?=
run: $(NEED_DEPS)
	@$(MAKE) --no-print-directory all
	$(PROG) $(RUN_ARGS)

# --- tests -----------------------------------------------------------------
check: $(NEED_DEPS)
	@$(MAKE) --no-print-directory purity
	@$(MAKE) --no-print-directory check-unit
	@$(MAKE) --no-print-directory check-scripts

check-unit: $(PROG) $(TEST_BIN)
	@fail=0; for t in $(TEST_BIN); do echo "== $$t"; $$t || fail=1; done; \
	[ $$fail = 0 ] || { echo "check-unit: FAILED"; exit 1; }

check-scripts: $(PROG)
	@fail=0; for s in $(TEST_SCRIPTS); do echo "== $$s"; \
	  VFCOACH=$(abspath $(PROG)) PYTHON=$(PYTHON) bash $$s || { echo "FAILED: $$s"; fail=1; }; done; \
	[ $$fail = 0 ] || { echo "check-scripts: FAILED"; exit 1; }

# coach/ library files must stay pure: no SDL, no V4L2, no stdio I/O.
purity:
	@bad=$$(grep -lE '#include *[<"](SDL|libv4l|linux/videodev|stdio\.h|unistd\.h|fcntl\.h)' $(COACH_SRC) coach/coach.h coach/*_internal.h 2>/dev/null); \
	if [ -n "$$bad" ]; then echo "purity: coach/ library files do I/O or use SDL/V4L2: $$bad" >&2; exit 1; fi; \
	echo "purity: coach/ library is pure computation"

asan:
	@$(MAKE) --no-print-directory VARIANT=asan BUILDDIR=$(BUILDROOT)/asan check-unit
tsan:
	@$(MAKE) --no-print-directory VARIANT=tsan BUILDDIR=$(BUILDROOT)/tsan check-unit

bench: $(NEED_DEPS)
	@$(MAKE) --no-print-directory VARIANT=bench BUILDDIR=$(BUILDROOT)/bench all
	$(BUILDROOT)/bench/vfcoach bench $(BENCH_ARGS)
	@[ ! -f tests/bench_reference.py ] || $(PYTHON) tests/bench_reference.py $(BUILDROOT)/bench/vfcoach

check-vm: $(NEED_DEPS)
	@$(MAKE) --no-print-directory all
	@[ -x tests/vm/run.sh ] && tests/vm/run.sh $(abspath $(PROG)) || { echo "check-vm: FAILED"; exit 1; }

install: all
	install -D -m 0755 $(PROG) $(DESTDIR)$(PREFIX)/bin/vfcoach
	install -D -m 0644 udev/70-vfcoach-camera.rules $(DESTDIR)/etc/udev/rules.d/70-vfcoach-camera.rules
	@if [ -z "$(DESTDIR)" ] && command -v udevadm >/dev/null && [ -d /run/udev ]; then \
	  udevadm control --reload-rules && udevadm trigger --subsystem-match=video4linux; fi

uninstall:
	rm -f $(DESTDIR)$(PREFIX)/bin/vfcoach $(DESTDIR)/etc/udev/rules.d/70-vfcoach-camera.rules

clean:
	rm -rf build
