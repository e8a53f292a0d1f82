#!/bin/sh
# Coverage of the z-expansion against the dipole on mock ensembles with a known truth: for each
# seed a mock ensemble is made from SPEC with seed SEED_BASE + i (i = 1..N_SEEDS) and analysed
# with PIPELINE (which must fit each form factor with a dipole and a z-expansion);
# zexp_coverage.py then prints, per method, model and quantity (G(0) and r of every fitted form
# factor in derived.csv), the share within 1 and 2 sigma of the truth, the mean and rms pull,
# and the median ratio of the z-expansion's error to the dipole's on the same seed.
#
#   tests/studies/zexp_coverage.sh [path/to/formfactory] [N_SEEDS] [SPEC] [PIPELINE] [SEED_BASE]
#
# Defaults: 10 seeds, tests/studies/heavy_vector.mock.yaml with
# tests/studies/heavy_vector.pipeline.yaml (heavy_axial.* is the axial mock), base 7100.
# The truth of a radius is that of the mock's own form-factor model (a dipole's
# r² = 12/M², a z-expansion's -6 G'(0)/G(0)), not of a z-fit to it.
# Environment: FF_KEEP=DIR keeps every seed's data and run in DIR (else a temporary directory
# is removed at the end); FF_SET="key=value ..." adds `--set` overrides to every run (e.g.
# FF_SET='resampling.autocorrelation_inflation=always'); FF_METHODS="two_state summation"
# chooses the methods printed (default two_state).
#
# Not part of the test suite (about 0.3 s per seed with a release build). Needs python3 with
# PyYAML.
set -eu
here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
bin=${1:-$root/target/release/formfactory}
n=${2:-10}
spec=${3:-$here/heavy_vector.mock.yaml}
pipeline=${4:-$here/heavy_vector.pipeline.yaml}
base=${5:-7100}
configs=-
prefix=ff-zexp
edit=""
# shellcheck source=tests/studies/mock_seeds.sh
. "$here/mock_seeds.sh"
python3 "$here/zexp_coverage.py" "$work" ${FF_METHODS:-two_state}
