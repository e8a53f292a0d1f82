# Shared by the mock studies (final_coverage.sh, ff_crosscheck.sh), sourced after they set
# `here`, `n_default` and `prefix`: reads their arguments
#   [path/to/formfactory] [N_SEEDS] [CONFIGS] [SPEC] [SEED_BASE]
# and, for each seed, makes a mock nucleon ensemble from SPEC with seed SEED_BASE + i (and
# CONFIGS configurations, "-" keeps the spec's; axial insertions removed) and analyses it
# with pipelines/nucleon-vector.yaml into $work/s<i>/{data,run}. Environment: FF_KEEP=DIR
# keeps every seed's data and run in DIR (a directory an earlier study made, or a new or
# empty one: anything else is refused, never deleted), else a temporary directory is removed
# at the end; FF_SET="key=value ..." adds `--set` overrides to every run. Leaves `work` set.
root=$(cd "$here/../.." && pwd)
bin=${1:-$root/target/release/formfactory}
n=${2:-$n_default}
configs=${3:--}
spec=${4:-$root/demo-data/nucleon.mock.yaml}
base=${5:-9000}
if [ -n "${FF_KEEP:-}" ]; then
    work=$FF_KEEP
    if [ -f "$work/.ff-study" ]; then
        rm -rf "$work"
    elif [ -d "$work" ] && [ -n "$(ls -A "$work")" ]; then
        echo "FF_KEEP=$work is not empty and was not made by a study: refused" >&2
        exit 2
    fi
    mkdir -p "$work"
    : >"$work/.ff-study"
else
    work=$(mktemp -d "/tmp/$prefix.XXXXXX")
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
    if [ "$configs" = "-" ]; then
        sed -e "s/^seed: .*/seed: $((base + seed))/" \
            -e '/currents: \[A1, A2, A3, A4\]/d' "$spec" >"$d/spec.yaml"
    else
        sed -e "s/^seed: .*/seed: $((base + seed))/" \
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
