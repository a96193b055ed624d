#!/usr/bin/env bash
# Device checks: the firmware of samples/device on three emulated boards (QEMU mps2-an386,
# microbit and virt), compared bit for bit with the workstation (tests/tests/device.rs).
#
#   bash tests/device/run.sh             run the device checks (fail if a tool is missing)
#   bash tests/device/run.sh --figures   the same, then rewrite the "Device figures" table of
#                                        README.md with the measured figures
#   bash tests/device/run.sh --install   install what they need: the Rust targets, a nightly
#                                        toolchain with them (stack frames only), Debian's QEMU;
#                                        exits non-zero, loudly, when an install fails
#   bash tests/device/run.sh --lint      rustfmt and clippy (warnings are errors) of the
#                                        firmware crate, for each target
set -euo pipefail
cd "$(dirname "$0")/../.."

TARGETS=(thumbv7em-none-eabihf thumbv6m-none-eabi riscv32imc-unknown-none-elf)

loud() {
    echo "!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!"
    for line in "$@"; do echo "!! $line"; done
    echo "!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!"
}

have_qemu() {
    command -v qemu-system-arm >/dev/null 2>&1 && command -v qemu-system-riscv32 >/dev/null 2>&1
}

install_qemu() {
    have_qemu && return 0
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -qq || return 1
    if apt-get install -y -qq --no-install-recommends qemu-system-arm qemu-system-misc; then
        return 0
    fi
    # A Debian release whose machine image carries newer QEMU tools from the release's
    # backports suite (qemu-utils) refuses the release's own qemu-system packages: take those
    # from the same backports suite, from the mirror the machine already uses.
    local codename uri list
    codename="$(. /etc/os-release && echo "${VERSION_CODENAME:-}")"
    uri="$(cat /etc/apt/sources.list.d/*.sources 2>/dev/null | awk '/^URIs:/ {print $2; exit}')"
    [ -n "$uri" ] || uri="$(awk '$1 == "deb" {print $2; exit}' /etc/apt/sources.list 2>/dev/null)"
    [ -n "$codename" ] && [ -n "$uri" ] || return 1
    list="$(mktemp)"
    echo "deb $uri ${codename}-backports main" >"$list"
    apt-get -o Dir::Etc::sourcelist="$list" update -qq &&
        apt-get -o Dir::Etc::sourcelist="$list" install -y -qq --no-install-recommends \
            -t "${codename}-backports" qemu-system-arm qemu-system-misc
    local rc=$?
    rm -f "$list"
    return $rc
}

install() {
    local failed=()
    rustup target add "${TARGETS[@]}" || failed+=("rustup target add ${TARGETS[*]}")
    if rustc +nightly --version >/dev/null 2>&1 ||
        rustup toolchain install nightly --profile minimal --no-self-update; then
        rustup +nightly target add "${TARGETS[@]}" || failed+=("rustup +nightly target add")
    else
        failed+=("rustup toolchain install nightly")
    fi
    install_qemu || failed+=("apt-get install qemu-system-arm qemu-system-misc")
    if [ ${#failed[@]} -gt 0 ]; then
        loud "DEVICE TOOLCHAIN INSTALL FAILED:" "${failed[@]}" \
            "The device checks (tests/tests/device.rs) cannot run on this machine."
        return 1
    fi
    echo "device toolchain: $(qemu-system-arm --version | head -1); nightly $(rustc +nightly --version)"
}

lint() {
    local manifest=samples/device/Cargo.toml
    cargo fmt --manifest-path "$manifest" -- --check
    for t in "${TARGETS[@]}"; do
        CARGO_TARGET_DIR=target/device cargo clippy --manifest-path "$manifest" --target "$t" \
            --bins --profile release -- -D warnings
    done
}

figures() {
    local table
    table="$(mktemp)"
    SINEW_DEVICE=require SINEW_DEVICE_FIGURES="$table" \
        cargo test -p sinew-tests --test device -- --nocapture
    # Replace what lies between the two markers of README.md with the new table.
    awk -v table="$table" '
        /<!-- device-figures:begin -->/ { print; while ((getline line < table) > 0) print line; skip = 1; next }
        /<!-- device-figures:end -->/ { skip = 0 }
        !skip { print }
    ' README.md >README.md.new
    mv README.md.new README.md
    rm -f "$table"
    echo "README.md: device figures updated"
}

case "${1:-}" in
    --install) install ;;
    --lint) lint ;;
    --figures) figures ;;
    "") SINEW_DEVICE=require cargo test -p sinew-tests --test device -- --nocapture ;;
    *)
        echo "usage: bash tests/device/run.sh [--install | --lint | --figures]" >&2
        exit 2
        ;;
esac
