#!/bin/sh
# Render the report of every example pipeline in headless Chromium (Debian's `chromium`
# package) and fail on console messages, images that do not load, empty report sections or
# plots without content. One screenshot per report is kept outside the repository.
#
#   tests/browser/check.sh [path/to/formfactory]
#
# FF_SHOT_DIR: where the screenshots go (default: a new folder under /tmp, printed at the end).
# Needs: chromium, python3 (standard library only). Installs chromium with apt-get if it is
# missing and the script runs as root.
set -eu

here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
bin=${1:-}
if [ -z "$bin" ]; then
    (cd "$root" && cargo build --release --quiet)
    bin="$root/target/release/formfactory"
fi
if ! command -v chromium >/dev/null 2>&1; then
    if [ "$(id -u)" = 0 ]; then
        apt-get install -y chromium >/dev/null
    else
        echo "browser check: chromium is not installed (apt-get install chromium)" >&2
        exit 2
    fi
fi

work=$(mktemp -d /tmp/ff-browser.XXXXXX)
shots=${FF_SHOT_DIR:-$work/screenshots}
mkdir -p "$shots"
cleanup() {
    # only what this script made; the screenshots stay
    rm -rf "$work/runs" "$work/profile-"* "$work/"*.dom.html "$work/"*.log "$work/"*.errors
    [ -n "${FF_SHOT_DIR:-}" ] && rmdir "$work" 2>/dev/null || true
}
trap cleanup EXIT

browse() { # browse PROFILE ARGS... : one headless Chromium, no network, fresh profile
    profile=$1
    shift
    mkdir -p "$profile"
    timeout 120 chromium --headless --no-sandbox --disable-gpu --disable-quic --no-first-run \
        --disable-background-networking --disable-component-update --disable-sync \
        --user-data-dir="$profile" --enable-logging=stderr --v=0 "$@"
}

status=0
for name in nucleon-vector nucleon-axial pion-vector excited-state-study meson-gevp; do
    out="$work/runs/$name"
    "$bin" run "$root/pipelines/$name.yaml" --out "$out" --force --quiet >/dev/null
    page="$out/report.html"
    browse "$work/profile-$name-dom" --dump-dom "file://$page" >"$work/$name.dom.html" \
        2>"$work/$name.log" || { echo "$name: chromium failed" >&2; status=1; continue; }
    if grep -E "CONSOLE|Uncaught|net::ERR_" "$work/$name.log" >"$work/$name.errors"; then
        echo "$name: browser console messages:" >&2
        cat "$work/$name.errors" >&2
        status=1
    fi
    python3 "$here/dom_check.py" "$work/$name.dom.html" "$out" || status=1
    browse "$work/profile-$name-shot" --hide-scrollbars --window-size=1200,2400 \
        --screenshot="$shots/$name.png" "file://$page" >/dev/null 2>&1 || true
done
echo "browser check: screenshots in $shots"
exit $status
