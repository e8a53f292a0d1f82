#!/bin/sh
# Coverage of the final values (final.csv: value and total error) on mock ensembles with a
# known truth: for each seed, a mock nucleon ensemble (the demo's spectrum, form factors and
# excited-state contamination, vector insertions only) is generated and analysed with
# pipelines/nucleon-vector.yaml; final_coverage.py then counts how often |value - truth| is
# within 1 and 2 total errors (G_E and G_M at every shell, G_E(0), G_M(0), r_E, r_M, kappa).
#
#   tests/studies/final_coverage.sh [path/to/formfactory] [N_SEEDS] [CONFIGS]
#
# Not part of the test suite (about 1 s per seed with a dev build). Needs python3 with PyYAML.
set -eu
here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
bin=${1:-$root/target/debug/formfactory}
n=${2:-20}
configs=${3:-100}
work=$(mktemp -d /tmp/ff-coverage.XXXXXX)
trap 'rm -rf "$work"' EXIT

seed=1
while [ "$seed" -le "$n" ]; do
    d="$work/s$seed"
    mkdir -p "$d"
    # the demo spec with another seed, ensemble size and without the axial insertions
    sed -e "s/^seed: .*/seed: $((9000 + seed))/" \
        -e "s/^  configs: .*/  configs: $configs/" \
        -e '/currents: \[A1, A2, A3, A4\]/d' \
        "$root/demo-data/nucleon.mock.yaml" >"$d/spec.yaml"
    "$bin" mock "$d/spec.yaml" --out "$d/data" >/dev/null
    if "$bin" run "$root/pipelines/nucleon-vector.yaml" --out "$d/run" --quiet \
        --set "data.twopt=$d/data/twopt.csv" --set "data.threept=$d/data/threept.csv" \
        --set "output.plots=[]" >/dev/null 2>"$d/err"; then
        :
    else
        echo "seed $seed: run failed: $(head -c 300 "$d/err")" >&2
    fi
    seed=$((seed + 1))
done
python3 "$here/final_coverage.py" "$work"
