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
# is removed at the end); FF_SET="key=value ..." adds `--set` overrides to every run;
# FF_PIPELINE=FILE analyses with another pipeline (e.g. tests/studies/heavy_vector.pipeline.yaml
# for tests/studies/heavy_vector.mock.yaml).
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
base=${5:-9000}
pipeline=${FF_PIPELINE:-$root/pipelines/nucleon-vector.yaml}
prefix=ff-coverage
edit='/currents: \[A1, A2, A3, A4\]/d' # vector insertions only
# shellcheck source=tests/studies/mock_seeds.sh
. "$here/mock_seeds.sh"
python3 "$here/final_coverage.py" "$work"
