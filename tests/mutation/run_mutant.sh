#!/usr/bin/env bash
# Run one mutmut mutant against given test files, from the repository root:
#   tests/mutation/run_mutant.sh tolerance.retardance.x_waves__mutmut_1 tests/test_x.py [...]
# Prints "NAME: killed|survived (pytest's last line)".  The tests are this checkout's (so a new
# test can be checked against a mutant before mutmut's copy of the tests is refreshed); the
# package is mutmut's mutated copy in mutants/ (python -m puts the working directory first).
set -u
name=$1; shift
root=$(cd "$(dirname "$0")/../.." && pwd)
args=()
for t in "$@"; do args+=("$root/$t"); done
cd "$root/mutants" || exit 2
out=$(MUTANT_UNDER_TEST=$name NUMBA_THREADING_LAYER=workqueue timeout 900 nice -n 19 \
      "$root/.venv/bin/python" -m pytest -x -q -p no:cacheprovider -p no:randomly "${args[@]}" 2>&1 | tail -1)
case "$out" in
  *failed*|*error*) echo "$name: killed ($out)";;
  *passed*) echo "$name: survived ($out)";;
  *) echo "$name: ? ($out)";;
esac
