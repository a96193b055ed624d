#!/usr/bin/env bash
# The performance table in one command (method and tables: bench/README.md):
#
#   bash bench/run.sh                      # criterion benches of the three builds, numpy, table
#   bash bench/run.sh --builds v3          # one build only (default, v3, native; comma list)
#   bash bench/run.sh --filter n2_         # only the benchmarks whose id contains n2_
#   bash bench/run.sh --callgrind [FILTER] # instruction counts per call under valgrind instead
#
# Builds: `default` (no RUSTFLAGS, the shared target folder), `v3` (-C target-cpu=x86-64-v3) and
# `native` (-C target-cpu=native), each in its own target folder so that no build invalidates
# another. numpy runs when python3 can make a venv with numpy (in /tmp, once); OPENBLAS_CORETYPE
# and OPENBLAS_L2_SIZE are unset for that one command only. The table is also written to
# target/bench-table.md.
set -euo pipefail
cd "$(dirname "$0")/.."

builds="default,v3,native"
filter=""
callgrind=""
while [ $# -gt 0 ]; do
    case "$1" in
        --builds) builds="$2"; shift 2 ;;
        --filter) filter="$2"; shift 2 ;;
        --callgrind) callgrind=1; shift
            # An optional filter follows, unless the next word is another option.
            if [ $# -gt 0 ] && [ "${1#--}" = "$1" ]; then filter="$1"; shift; fi ;;
        *) echo "unknown argument $1" >&2; exit 2 ;;
    esac
done

# Absolute folders: `cargo bench` runs the benchmark in bench/, and criterion writes its results
# under CARGO_TARGET_DIR, which must therefore not be relative.
root="$(pwd)"
target_of() {
    case "$1" in
        default) echo "$root/target" ;;
        v3) echo "$root/target/bench-v3" ;;
        native) echo "$root/target/bench-native" ;;
        *) echo "unknown build $1" >&2; exit 2 ;;
    esac
}
flags_of() {
    case "$1" in
        default) echo "" ;;
        v3) echo "-C target-cpu=x86-64-v3" ;;
        native) echo "-C target-cpu=native" ;;
    esac
}
run_in() { # BUILD COMMAND...: runs COMMAND with the build's RUSTFLAGS and target folder
    local b="$1"; shift
    local dir flags
    dir="$(target_of "$b")"; flags="$(flags_of "$b")"
    if [ -z "$flags" ]; then
        env -u RUSTFLAGS CARGO_TARGET_DIR="$dir" "$@"
    else
        env RUSTFLAGS="$flags" CARGO_TARGET_DIR="$dir" "$@"
    fi
}

if [ -n "$callgrind" ]; then
    command -v valgrind >/dev/null || { echo "valgrind is missing: apt-get install -y valgrind" >&2; exit 1; }
    for b in ${builds//,/ }; do
        echo "## Instructions per call, build \`$b\` (valgrind --tool=callgrind)"
        echo
        run_in "$b" cargo build --release --quiet -p sinew-bench --bin count
        "$(target_of "$b")/release/count" $filter
        echo
    done
    exit 0
fi

args=()
for b in ${builds//,/ }; do
    echo "== criterion, build $b" >&2
    run_in "$b" cargo bench -p sinew-bench --bench nets -- --warm-up-time 1 --measurement-time 2 $filter >&2
    args+=(--build "$b=$(target_of "$b")")
done

venv="/tmp/sinew-bench-venv"
py=""
if [ -x "$venv/bin/python" ] && "$venv/bin/python" -c "import numpy" 2>/dev/null; then
    py="$venv/bin/python"
elif command -v python3 >/dev/null && python3 -m venv "$venv" >/dev/null 2>&1 \
    && timeout 300 "$venv/bin/pip" install --quiet --disable-pip-version-check numpy threadpoolctl; then
    py="$venv/bin/python"
fi
if [ -n "$py" ]; then
    echo "== numpy" >&2
    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE OPENBLAS_NUM_THREADS=1 \
        "$py" bench/numpy_baseline.py target/bench-numpy.json >&2
    args+=(--numpy target/bench-numpy.json)
else
    echo "note: no python3 with numpy (venv in $venv): numpy is left out of the table" >&2
fi

env -u RUSTFLAGS cargo run --release --quiet -p sinew-bench --bin table -- "${args[@]}" --compile \
    | tee target/bench-table.md

# Instructions per inference on the Cortex-M4F (QEMU), generated code against nalgebra, when the
# target and QEMU are installed (`bash tests/device/run.sh --install`).
if command -v qemu-system-arm >/dev/null && rustup target list --installed 2>/dev/null | grep -q thumbv7em-none-eabihf; then
    echo >&2 "== Cortex-M4F instruction counts (bench/device)"
    { echo; echo "### Cortex-M4F (QEMU mps2-an386), instructions per inference"; echo; bash bench/device/run.sh; } \
        | tee -a target/bench-table.md
else
    echo "note: qemu-system-arm or the thumbv7em-none-eabihf target is missing: no Cortex-M4F counts" >&2
fi
