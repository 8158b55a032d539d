#!/bin/bash
# MPI checks run by ctest: every job under `mpirun -n 2` gives the serial results (files equal
# byte for byte once the measured times are removed), a failure stops both ranks with the serial
# exit code and message, and a fit whose rank is killed resumes to the uninterrupted result,
# with the same or another number of ranks.
# Usage: mpi_checks.sh CASE STILLPOINT_BINARY SOURCE_DIR MPIRUN
set -u
case_name=$1 bin=$2 src=$3 mpirun=$4
export OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1 OPENBLAS_NUM_THREADS=1
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cd "$work" || exit 2
fail() { echo "FAIL: $*" >&2; exit 1; }
mpi() { timeout 300 "$mpirun" -n "$1" --oversubscribe "${@:2}"; }
# Measured times are the only thing allowed to differ (and a resumed fit's count of replayed
# evaluations): JSON keys about seconds are dropped, "1.23 s" in text becomes "T s".
untimed() {
  case $1 in
    *.json) /usr/bin/python3 -c '
import json, sys
def clean(v):
    if isinstance(v, dict):
        return {k: clean(x) for k, x in v.items() if "seconds" not in k and k not in ("replayed_evaluations", "resumed")}
    if isinstance(v, list):
        return [clean(x) for x in v]
    return v
print(json.dumps(clean(json.load(open(sys.argv[1]))), indent=1, sort_keys=True))' "$1" ;;
    *) sed -E 's/[0-9]+\.[0-9]+(e[-+]?[0-9]+)? s\b/T s/g' "$1" ;;
  esac
}
# A resumed fit replays the logged evaluations instead of computing them; everything else matches.
same_tree() {
  local a=$1 b=$2 f
  [ -d "$a" ] && [ -d "$b" ] || fail "missing output folder $a or $b"
  diff <(cd "$a" && find . -type f | sort) <(cd "$b" && find . -type f | sort) || fail "$a and $b hold different files"
  while read -r f; do
    case $f in
      *.png | *.svg | ./checkpoint.bin) continue ;;
      */history.csv | ./history.csv) diff <(cut -d, -f1-4,6- "$a/$f") <(cut -d, -f1-4,6- "$b/$f") >/dev/null || fail "$f differs" ;;
      *) diff <(untimed "$a/$f") <(untimed "$b/$f") >/dev/null || { diff <(untimed "$a/$f") <(untimed "$b/$f") | head -5; fail "$f differs"; } ;;
    esac
  done < <(cd "$a" && find . -type f | sort)
}
same_stdout() { diff <(untimed "$1" | sed "s#$2#OUT#g") <(untimed "$3" | sed "s#$4#OUT#g") || fail "standard output differs ($1, $3)"; }

case $case_name in
  grad)
    for args in "$src/workflows/fit-atoms-xalpha.toml" "$src/workflows/grad-1d-helium.toml --verify" \
                "$src/workflows/grad-1d-helium.toml --mode tangent" "$src/workflows/fit-1d-potential.toml --mode tangent"; do
      rm -rf out-serial out-mpi
      "$bin" grad $args -q -o out-serial > s.txt || fail "serial grad $args"
      mpi 2 "$bin" grad $args -q -o out-mpi > p.txt || fail "mpirun grad $args"
      same_stdout s.txt out-serial p.txt out-mpi
      same_tree out-serial out-mpi
    done ;;
  fit)
    for wf in fit-atoms-exchange fit-1d-formula; do
      rm -rf out-serial out-mpi
      "$bin" fit "$src/workflows/$wf.toml" -q -o out-serial > s.txt || fail "serial fit $wf"
      mpi 2 "$bin" fit "$src/workflows/$wf.toml" -q -o out-mpi > p.txt || fail "mpirun fit $wf"
      same_stdout s.txt out-serial p.txt out-mpi
      same_tree out-serial out-mpi
    done ;;
  solve)
    for wf in solve-1d-molecule solve-atoms-gga; do
      rm -rf out-serial out-mpi
      (cd "$src/workflows" && "$bin" solve $wf.toml -q -o "$work/out-serial") > s.txt || fail "serial solve $wf"
      (cd "$src/workflows" && mpi 2 "$bin" solve $wf.toml -q -o "$work/out-mpi") > p.txt || fail "mpirun solve $wf"
      same_stdout s.txt out-serial p.txt out-mpi
      same_tree out-serial out-mpi
    done ;;
  check)
    "$bin" check "$src/basis-data/reference/nist-lda-lsd.csv" -q --report s.json --junit s.xml > s.txt || fail "serial check"
    mpi 2 "$bin" check "$src/basis-data/reference/nist-lda-lsd.csv" -q --report p.json --junit p.xml > p.txt || fail "mpirun check"
    same_stdout s.txt @none@ p.txt @none@
    diff <(untimed s.json) <(untimed p.json) || fail "check report differs"
    diff <(untimed s.xml | sed -E 's/time="[0-9.]+"/time="T"/g') <(untimed p.xml | sed -E 's/time="[0-9.]+"/time="T"/g') || fail "junit differs" ;;
  exact)
    for wf in exact-batch-helium-series exact-1d-helium; do
      rm -rf out-serial out-mpi
      "$bin" exact "$src/workflows/$wf.toml" -q -o out-serial > s.txt || fail "serial exact $wf"
      mpi 2 "$bin" exact "$src/workflows/$wf.toml" -q -o out-mpi > p.txt || fail "mpirun exact $wf"
      same_stdout s.txt out-serial p.txt out-mpi
      same_tree out-serial out-mpi
    done ;;
  invert)
    # Not shared over ranks: rank 0 alone runs it and writes, and says so.
    rm -rf out-serial out-mpi
    (cd "$src/workflows" && "$bin" invert invert-1d-lda.toml -q -o "$work/out-serial") > s.txt || fail "serial invert"
    (cd "$src/workflows" && mpi 2 "$bin" invert invert-1d-lda.toml -q -o "$work/out-mpi") > p.txt 2> p.err || fail "mpirun invert"
    grep -q "rank 0 runs it" p.err || fail "no note that rank 0 runs invert alone"
    same_stdout s.txt out-serial p.txt out-mpi
    same_tree out-serial out-mpi ;;
  failure)
    # Two systems: Ne converges on rank 0; H- with exchange only (its extra electron is not
    # bound in LDA, a fact of the trade) cannot converge, on rank 1 by its estimated cost.
    # Both runs must stop with exit 3 and the same message, once, and write nothing.
    cat > bad.toml <<'TOML'
[[system]]
name = "Ne"
kind = "atom"
element = "Ne"
xc = ["lda_x"]
[[system]]
name = "H-"
kind = "atom"
element = "H"
charge = -1
xc = ["lda_x"]
[[parameter]]
name = "a"
kind = "xc_weight"
term = 0
[[loss]]
kind = "energy"
system = "Ne"
target = -128.2
[[loss]]
kind = "energy"
system = "H-"
target = -0.5
TOML
    "$bin" grad bad.toml -o out-serial > s.txt 2> s.err; rs=$?
    mpi 2 "$bin" grad bad.toml -o out-mpi > p.txt 2> p.err; rp=$?
    [ "$rs" = 3 ] || { cat s.err; fail "serial exit $rs, expected 3"; }
    [ "$rp" = "$rs" ] || { cat p.err; fail "mpirun exit $rp, serial $rs"; }
    diff <(grep '^stillpoint:' s.err) <(grep '^stillpoint:' p.err) || fail "messages differ"
    [ "$(grep -c '^stillpoint: numerical failure' p.err)" = 1 ] || fail "the message must appear once"
    grep -q "system 'H-'" p.err && ! grep -q "system 'Ne'" p.err || fail "only H- fails"
    [ ! -e out-serial ] && [ ! -e out-mpi ] || fail "a failed run wrote output" ;;
  resume)
    # Uninterrupted serial reference, then a two-rank run whose rank 1 dies after iteration 12:
    # the job ends (no hang) and --resume finishes it, with two ranks and with one.
    wf=$src/workflows/fit-1d-formula.toml
    "$bin" fit "$wf" -q -o ref > ref.txt || fail "serial fit"
    for k in 2 1; do
      rm -rf run
      STILLPOINT_TEST_KILL_RANK_AT=1:12 mpi 2 "$bin" fit "$wf" -q -o run > /dev/null 2>&1 && fail "the killed job reported success"
      [ -f run/checkpoint.bin ] || fail "no checkpoint after the kill"
      [ -f run/fit.json ] && fail "a killed job wrote its report"
      mpi "$k" "$bin" fit "$wf" -q -o run --resume > run.txt || fail "resume with $k rank(s)"
      same_tree ref run
    done ;;
  *) fail "unknown case $case_name" ;;
esac
echo "mpi $case_name: serial and mpirun agree"
