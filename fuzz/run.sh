#!/bin/sh
# Run one fuzz target for a given time: fuzz/run.sh TARGET SECONDS [extra libFuzzer flags]
# Targets: twopt, threept, pipeline, mockspec. Needs the nightly toolchain and cargo-fuzz
# (`cargo install cargo-fuzz`). New inputs go to fuzz/corpus/TARGET, crashes to
# fuzz/artifacts/TARGET. Memory per input is capped so an input that allocates without bound
# is reported as a finding.
set -eu
if [ $# -lt 2 ]; then
    echo "usage: $0 TARGET SECONDS [libFuzzer flags]" >&2
    exit 2
fi
target=$1
seconds=$2
shift 2
cd "$(dirname "$0")"
mkdir -p "corpus/$target" "artifacts/$target"
exec cargo +nightly fuzz run "$target" "corpus/$target" "seeds/$target" -- \
    -max_total_time="$seconds" -rss_limit_mb=2048 -malloc_limit_mb=2048 -timeout=30 \
    -max_len=65536 -print_final_stats=1 "$@"
