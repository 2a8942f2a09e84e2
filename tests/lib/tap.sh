# Tiny TAP helpers for shell tests. Source it, call `check NAME CMD...` or
# `check_fails NAME EXPECTED_EXIT EXPECTED_MESSAGE CMD...`, then `finish`.
# $NADIR is the program under test (set by tests/run through ND_NADIR).
NADIR="${ND_NADIR:-build/nadir}"
TAP_N=0
TAP_FAILED=0
TAP_TMP=$(mktemp -d)
trap 'rm -rf "$TAP_TMP"' EXIT

ok() { TAP_N=$((TAP_N + 1)); echo "ok $TAP_N - $1"; }
not_ok() { TAP_N=$((TAP_N + 1)); TAP_FAILED=$((TAP_FAILED + 1)); echo "not ok $TAP_N - $1"; [ -n "${2:-}" ] && echo "# $2"; }

# check NAME CMD...: passes when CMD exits 0.
check() {
  local name="$1"; shift
  if "$@" >"$TAP_TMP/out" 2>"$TAP_TMP/err"; then ok "$name"; else
    not_ok "$name" "exit $?: $(head -c 400 "$TAP_TMP/err")"; fi
}

# check_fails NAME CODE MESSAGE CMD...: passes when CMD exits with CODE and
# its stderr contains MESSAGE, with no sanitizer report.
check_fails() {
  local name="$1" code="$2" msg="$3"; shift 3
  "$@" >"$TAP_TMP/out" 2>"$TAP_TMP/err"
  local rc=$?
  if [ $rc -ne "$code" ]; then not_ok "$name" "exit $rc, expected $code: $(head -c 400 "$TAP_TMP/err")"
  elif ! grep -qF -- "$msg" "$TAP_TMP/err"; then not_ok "$name" "stderr lacks '$msg': $(head -c 400 "$TAP_TMP/err")"
  elif grep -qE 'Sanitizer|runtime error' "$TAP_TMP/err"; then not_ok "$name" "sanitizer report"
  else ok "$name"; fi
}

finish() { echo "1..$TAP_N"; [ "$TAP_FAILED" -eq 0 ]; }
