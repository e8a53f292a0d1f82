#!/bin/sh
# Coverage of the final values (final.csv: value and total error) on mock ensembles with a
# known truth: for each seed, a mock nucleon ensemble is generated from SPEC with another seed
# (and CONFIGS configurations; axial insertions removed) and analysed with
# pipelines/nucleon-vector.yaml; final_coverage.py then counts how often |value - truth| is
# within 1 and 2 total errors (G_E and G_M at every shell, G_E(0), G_M(0), r_E, r_M, kappa)
# and prints the pulls per quantity, per estimator alone and the weights the average gave.
#
#   tests/studies/final_coverage.sh [path/to/formfactory] [N_SEEDS] [CONFIGS] [SPEC]
#
# SPEC defaults to the demo nucleon spec (demo-data/nucleon.mock.yaml: gap 0.27, overlap 0.8);
# tests/studies/strong_excited.mock.yaml is the same ensemble with strong excited states.
# CONFIGS defaults to the spec's own count ("-" keeps it too).
# Environment: FF_KEEP=DIR keeps every seed's data and run in DIR (else a temporary directory
# is removed at the end); FF_SET="key=value ..." adds `--set` overrides to every run.
#
# Not part of the test suite (about 0.5 s per seed with a release build). Needs python3 with
# PyYAML.
set -eu
here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
bin=${1:-$root/target/release/formfactory}
n=${2:-20}
configs=${3:--}
spec=${4:-$root/demo-data/nucleon.mock.yaml}
if [ -n "${FF_KEEP:-}" ]; then
    work=$FF_KEEP
    rm -rf "$work"
    mkdir -p "$work"
else
    work=$(mktemp -d /tmp/ff-coverage.XXXXXX)
    trap 'rm -rf "$work"' EXIT
fi
extra=""
for s in ${FF_SET:-}; do
    extra="$extra --set $s"
done

seed=1
while [ "$seed" -le "$n" ]; do
    d="$work/s$seed"
    mkdir -p "$d"
    # the spec with another seed and ensemble size, without axial insertions
    if [ "$configs" = "-" ]; then
        sed -e "s/^seed: .*/seed: $((9000 + seed))/" \
            -e '/currents: \[A1, A2, A3, A4\]/d' "$spec" >"$d/spec.yaml"
    else
        sed -e "s/^seed: .*/seed: $((9000 + seed))/" \
            -e "s/^  configs: .*/  configs: $configs/" \
            -e '/currents: \[A1, A2, A3, A4\]/d' "$spec" >"$d/spec.yaml"
    fi
    "$bin" mock "$d/spec.yaml" --out "$d/data" >/dev/null
    # shellcheck disable=SC2086 # $extra is a list of arguments
    if "$bin" run "$root/pipelines/nucleon-vector.yaml" --out "$d/run" --quiet \
        --set "data.twopt=$d/data/twopt.csv" --set "data.threept=$d/data/threept.csv" \
        --set "output.plots=[]" $extra >/dev/null 2>"$d/err"; then
        :
    else
        echo "seed $seed: run failed: $(head -c 300 "$d/err")" >&2
    fi
    seed=$((seed + 1))
done
python3 "$here/final_coverage.py" "$work"
