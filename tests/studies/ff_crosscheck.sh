#!/bin/sh
# How well formfactor_crosscheck.csv flags plateau form factors biased by excited states, on
# mock ensembles with a known truth: for each seed a mock nucleon ensemble is made from SPEC
# with another seed (and CONFIGS configurations; axial insertions removed) and analysed with
# pipelines/nucleon-vector.yaml; ff_crosscheck.py then counts, per tsep and overall, how many
# plateau form factors lie more than 2 of their own statistical errors from the truth and how
# many of those the `biased` column flags (detection), and the false alarms two ways (flagged
# among the plateaus within 2 sigma of the truth, and the share of flags that fall on them).
#
#   tests/studies/ff_crosscheck.sh [path/to/formfactory] [N_SEEDS] [CONFIGS] [SPEC] [SEED_BASE]
#
# SPEC defaults to demo-data/nucleon.mock.yaml; tests/studies/strong_excited.mock.yaml has
# strong excited states. CONFIGS "-" keeps the spec's count. Seeds are SEED_BASE+1 ..
# SEED_BASE+N (default base 9000, the seeds of final_coverage.sh; use another base for a
# fresh set). Environment as final_coverage.sh: FF_KEEP=DIR keeps the runs, FF_SET="key=value
# ..." adds `--set` overrides, FF_PIPELINE=FILE another pipeline. Not part of the test suite (well under a second per seed with a
# release build). Needs python3 with PyYAML. Other rules for the verdict can be scored offline
# on kept runs: python3 tests/studies/ff_crossrule.py DIR [DIR ...].
set -eu
here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
bin=${1:-$root/target/release/formfactory}
n=${2:-10}
configs=${3:--}
spec=${4:-$root/demo-data/nucleon.mock.yaml}
base=${5:-9000}
pipeline=${FF_PIPELINE:-$root/pipelines/nucleon-vector.yaml}
prefix=ff-xcheck
edit='/currents: \[A1, A2, A3, A4\]/d' # vector insertions only
# shellcheck source=tests/studies/mock_seeds.sh
. "$here/mock_seeds.sh"
python3 "$here/ff_crosscheck.py" "$work"
