#!/usr/bin/env bash
# Instructions per single-sample inference of N1, N2 and the conv network C1 on a Cortex-M4F
# (QEMU mps2-an386): (a) the code sinew generates against (b) the same network written with
# nalgebra, and for C1 also (c) written as plain loops over arrays.
#
#   bash bench/device/run.sh              both profiles: release (opt-level 3) and size ("z")
#   bash bench/device/run.sh release      one profile only
#
# Builds the firmware of this folder for thumbv7em-none-eabihf (target folder
# target/bench-device), runs it under QEMU with one instruction per translation block and
# `-d exec,nochain` (every executed instruction is one log line), counts the lines between each
# pair of marker functions, subtracts the empty pair, checks that (a), (b) and (c) print outputs
# within 1e-5 of each other, and prints a Markdown table. Needs qemu-system-arm and the target
# (`bash tests/device/run.sh --install` installs them) and llvm-nm from rustup's llvm-tools.
# These are instructions, not cycles.
set -euo pipefail
cd "$(dirname "$0")"

TARGET=thumbv7em-none-eabihf
export CARGO_TARGET_DIR=../../target/bench-device
if [ $# -gt 0 ]; then profiles=("$@"); else profiles=(release size); fi
for p in "${profiles[@]}"; do
    case "$p" in
        release | size) ;;
        *) echo "usage: bash bench/device/run.sh [release] [size]" >&2; exit 2 ;;
    esac
done

nm_tool() {
    local t
    for t in "$(rustc --print sysroot)"/lib/rustlib/*/bin/llvm-nm; do
        [ -x "$t" ] && { echo "$t"; return 0; }
    done
    command -v llvm-nm || { echo "no llvm-nm: rustup component add llvm-tools" >&2; return 1; }
}
NM="$(nm_tool)"
command -v qemu-system-arm >/dev/null ||
    { echo "no qemu-system-arm: bash tests/device/run.sh --install" >&2; exit 1; }

opt_level() {
    case "$1" in
        release) echo 3 ;;
        size) echo z ;;
    esac
}

# The even address of the function `count::NAME` in the ELF $1 (Thumb symbols carry bit 0), in
# lower-case hex without leading zeros (the PC field of QEMU's exec log has 16 digits in recent
# versions and 8 in Debian 12's 7.2; the log reader strips the zeros too).
marker() {
    local addr
    addr="$("$NM" -C "$1" | awk -v n="count::$2" '$3 == n || index($3, n "::h") == 1 { print $1; exit }')"
    [ -n "$addr" ] || { echo "no marker $2 in $1" >&2; return 1; }
    printf '%x\n' "$(( 0x$addr & ~1 ))"
}

PAIRS=(empty n1_sinew n1_nalg n2_sinew n2_nalg c1_sinew c1_nalg c1_plain)
log="$(mktemp)"
out="$(mktemp)"
trap 'rm -f "$log" "$out"' EXIT

table="| network | opt-level | (a) sinew | (b) nalgebra | (c) plain loops | (a)/(b) | (a)/(c) |
| --- | :---: | ---: | ---: | ---: | ---: | ---: |"
# One guest instruction per translation block: `-accel tcg,one-insn-per-tb=on` from QEMU 8.1 on,
# `-singlestep` before (Debian 12 ships 7.2).
qemu_version="$(qemu-system-arm --version | sed -n 's/.*version \([0-9]*\)\.\([0-9]*\).*/\1 \2/p' | head -1)"
read -r qmajor qminor <<<"${qemu_version:-0 0}"
if [ "$qmajor" -gt 8 ] || { [ "$qmajor" -eq 8 ] && [ "$qminor" -ge 1 ]; }; then
    one_insn=(-accel tcg,one-insn-per-tb=on)
else
    one_insn=(-singlestep)
fi
for profile in "${profiles[@]}"; do
    cargo build --quiet --profile "$profile" --target "$TARGET"
    elf="$CARGO_TARGET_DIR/$TARGET/$profile/count"

    addrs=()
    for p in "${PAIRS[@]}"; do
        addrs+=("$(marker "$elf" "mark_${p}_begin")" "$(marker "$elf" "mark_${p}_end")")
    done

    timeout 300 qemu-system-arm -M mps2-an386 -nographic -monitor none \
        -semihosting-config enable=on,target=native \
        "${one_insn[@]}" -d exec,nochain -D "$log" \
        -kernel "$elf" >"$out" || { echo "the firmware failed:" >&2; cat "$out" >&2; exit 1; }
    lines="$(tr -d '\r' <"$out" | grep '^out ' || true)"
    printf '%s\n' "$lines" >"$out"

    # Each log line: `Trace 0: HOST [CS_BASE/PC/FLAGS/CFLAGS] SYMBOL`. Count the lines from a
    # begin marker's first instruction up to (not including) its end marker's, pair by pair.
    read -r -a counts <<<"$(awk -v list="${addrs[*]}" '
        BEGIN { n = split(list, a, " "); k = 1; open = 0 }
        {
            s = index($0, "["); if (!s) next
            split(substr($0, s + 1), f, "/")
            pc = f[2]; sub(/^0+/, "", pc)
            if (k > n) exit
            if (!open && pc == a[k]) open = 1
            else if (open && pc == a[k + 1]) { open = 0; k += 2; next }
            if (open) c[k]++
        }
        END {
            if (k <= n) { print "incomplete"; exit }
            for (i = 1; i <= n; i += 2) printf "%d ", c[i]
            print ""
        }' "$log")"
    if [ "${counts[0]}" = incomplete ]; then
        echo "the exec log ended before the markers ($profile)" >&2
        exit 1
    fi

    # (a) and each hand-written form agree within 1e-5.
    for pair in n1_nalgebra n2_nalgebra c1_nalgebra c1_plain; do
        net="${pair%%_*}"
        awk -v net="$net" -v other="$pair" '
            $2 == net "_sinew" { for (i = 3; i <= NF; i++) a[i] = $i; na = NF }
            $2 == other { for (i = 3; i <= NF; i++) b[i] = $i; nb = NF }
            END {
                if (!na || na != nb) { print other ": outputs missing or of different widths"; exit 1 }
                m = 0
                for (i = 3; i <= na; i++) { d = a[i] - b[i]; if (d < 0) d = -d; if (d > m) m = d }
                if (m > 1e-5) { printf "%s: outputs differ by %g > 1e-5\n", other, m; exit 1 }
                printf "%s (%s): outputs agree with %s_sinew, largest difference %.3g\n", other, prof, net, m
            }' prof="$profile" "$out" >&2
    done

    empty="${counts[0]}"
    row() { # NAME A B [C]: instructions of (a), (b) and (c), the empty pair not yet subtracted
        local a=$(( $2 - empty )) b=$(( $3 - empty )) c="" ac=""
        if [ $# -gt 3 ]; then
            c=$(( $4 - empty ))
            ac="$(awk -v a="$a" -v c="$c" 'BEGIN { printf "%.3f", a / c }')"
        fi
        printf '| %s | %s | %d | %d | %s | %s | %s |\n' "$1" "$(opt_level "$profile")" "$a" "$b" \
            "$c" "$(awk -v a="$a" -v b="$b" 'BEGIN { printf "%.3f", a / b }')" "$ac"
    }
    table+=$'\n'"$(row "N1 6-10-8-3" "${counts[1]}" "${counts[2]}")"
    table+=$'\n'"$(row "N2 64-32-10" "${counts[3]}" "${counts[4]}")"
    table+=$'\n'"$(row "C1 conv 128 x 3" "${counts[5]}" "${counts[6]}" "${counts[7]}")"
done

echo
echo "Instructions per single-sample inference, f32, Cortex-M4F (QEMU mps2-an386):"
echo
echo "$table"
