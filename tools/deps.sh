#!/bin/sh
# Checks that the Debian packages nadir needs are installed. As root, installs
# the missing ones; otherwise prints the exact command and fails.
# Used by `make`, `make test`, `make demo` and .ci/run. xtb (GFN2-xTB) is the
# reference method of the checks in tests/reference/ and of `make dataset`.
set -e
need="gcc make pkg-config libopenblas-dev liblapacke-dev libcjson-dev libcmocka-dev python3-numpy python3-scipy xtb"
[ -n "$ND_DEPS_EXTRA" ] && need="$need $ND_DEPS_EXTRA"
missing=""
for p in $need; do
  if ! dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed"; then
    missing="$missing $p"
  fi
done
[ -z "$missing" ] && exit 0
if [ "$(id -u)" = 0 ]; then
  echo "nadir: installing missing packages:$missing" >&2
  export DEBIAN_FRONTEND=noninteractive
  apt-get update -qq >/dev/null 2>&1 || true
  # shellcheck disable=SC2086
  apt-get install -y -qq $missing >/dev/null || {
    echo "nadir: apt-get install failed for:$missing" >&2; exit 1; }
else
  echo "nadir: missing packages:$missing" >&2
  echo "run:   sudo apt-get install -y$missing" >&2
  exit 1
fi
