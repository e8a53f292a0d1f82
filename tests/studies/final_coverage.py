"""Pulls of final.csv against the mock truth, per seed directory (see final_coverage.sh).

For a form factor at a shell the truth is the value at the truth point with p_f = 0 and
|q|^2 = nq2 of the shell label; G_E(0), G_M(0) are the truth at q = 0; for the dipole form
factors of the spec, r = sqrt(12) / M * a (fm) and kappa = G_M(0) - G_E(0).
Coverage is compared with the normal 68.3 % and 95.4 % and judged with the binomial
standard deviation of the count. Also printed: the pulls per quantity, the pulls of each
estimator alone (statistical error only) for G_E and G_M at the shells, and the mean weight
each estimator received in the final values of the shells (and how often it was excluded).
"""
import csv
import math
import os
import random
import sys

import yaml
from mock_truth import shell_truth


def truth_values(truth, spec):
    out = shell_truth(truth)
    a = truth["lattice"]["a_fm"]
    ffs = spec["form_factors"]
    out[("GE(0)", None)] = out[("GE", 0)]
    out[("GM(0)", None)] = out[("GM", 0)]
    out[("kappa", None)] = out[("GM", 0)] - out[("GE", 0)]
    for ff in ("GE", "GM"):
        m = ffs[ff]["mass"]
        # (r2_ is r_ squared: the same pull, so counted once)
        out[(f"r_{ff}", None)] = math.sqrt(12.0) / m * a
    return out


def seed_bootstrap_error(pulls, k, draws=2000):
    """Standard error of the share of |pull| < k, resampling whole seeds with replacement.

    The quantities of one seed come from the same ensemble and are correlated, so the
    binomial error of the count understates the uncertainty of the share (common practice:
    a cluster bootstrap over the independent units)."""
    per_seed = {}
    for _, p, seed in pulls:
        inside, total = per_seed.get(seed, (0, 0))
        per_seed[seed] = (inside + (abs(p) < k), total + 1)
    counts = list(per_seed.values())
    rng = random.Random(1)
    shares = []
    for _ in range(draws):
        pick = [counts[rng.randrange(len(counts))] for _ in counts]
        shares.append(sum(c[0] for c in pick) / sum(c[1] for c in pick))
    mean = sum(shares) / draws
    return math.sqrt(sum((x - mean) ** 2 for x in shares) / (draws - 1))


def main():
    work = sys.argv[1]
    pulls = []  # (quantity, pull)
    variant_pulls = {}  # (estimator, form factor) -> pulls at every shell (stat error)
    weights = {}  # estimator -> weights in the final values at the shells
    excluded = {}  # estimator -> number of shells where it was excluded
    runs = 0
    for seed_dir in sorted(os.listdir(work)):
        d = os.path.join(work, seed_dir)
        final = os.path.join(d, "run", "final.csv")
        if not os.path.exists(final):
            continue
        runs += 1
        with open(os.path.join(d, "data", "truth.yaml")) as f:
            truth = yaml.safe_load(f)
        with open(os.path.join(d, "spec.yaml")) as f:
            spec = yaml.safe_load(f)
        want = truth_values(truth, spec)
        with open(os.path.join(d, "run", "final_variants.csv")) as f:
            for row in csv.DictReader(f):
                if not row["shell"]:
                    continue
                key = (row["quantity"], int(row["shell"].split("nq2=")[1]))
                err = float(row["error"])
                if key in want and err > 0:
                    p = (float(row["value"]) - want[key]) / err
                    variant_pulls.setdefault((row["method"], row["quantity"]), []).append(p)
                weights.setdefault(row["method"], []).append(float(row["weight"]))
                if row["excluded"] and not row["excluded"].startswith("final value pinned"):
                    excluded[row["method"]] = excluded.get(row["method"], 0) + 1
        with open(final) as f:
            for row in csv.DictReader(f):
                q = row["quantity"]
                if row["shell"]:
                    nq2 = int(row["shell"].split("nq2=")[1])
                    key = (q, nq2)
                else:
                    key = (q, None)
                if key not in want:
                    continue
                err = float(row["error_total"])
                if not (err > 0):
                    continue
                pulls.append((q if not row["shell"] else f"{q} nq2={key[1]}",
                              (float(row["value"]) - want[key]) / err, runs))
    n = len(pulls)
    if n == 0:
        print("no pulls")
        return 1
    allp = [p for _, p, _ in pulls]
    print(f"all: n {n}, mean pull {sum(allp) / n:+.2f}, "
          f"pull rms {math.sqrt(sum(p * p for p in allp) / n):.2f}")
    for k, expected in ((1, 0.6827), (2, 0.9545)):
        inside = sum(1 for _, p, _ in pulls if abs(p) < k)
        sd = math.sqrt(expected * (1 - expected) / n)
        print(f"within {k} sigma: {inside}/{n} = {inside / n:.3f} "
              f"+- {seed_bootstrap_error(pulls, k):.3f} seed bootstrap "
              f"(normal {expected:.3f} +- {sd:.3f} binomial)")
    by = {}
    for q, p, _ in pulls:
        by.setdefault(q, []).append(p)
    print(f"{runs} runs; per quantity: n, within 1 sigma, within 2 sigma, mean pull, rms pull")
    for q in sorted(by):
        ps = by[q]
        w1 = sum(abs(p) < 1 for p in ps)
        w2 = sum(abs(p) < 2 for p in ps)
        mean = sum(ps) / len(ps)
        rms = math.sqrt(sum(p * p for p in ps) / len(ps))
        print(f"  {q:<14} {len(ps):3d} {w1:3d} {w2:3d} {mean:+.2f} {rms:.2f}")
    print("each estimator alone at every shell (statistical error): "
          "n, within 1 and 2 sigma, mean pull, rms pull")
    for m, ff in sorted(variant_pulls):
        ps = variant_pulls[(m, ff)]
        w1 = sum(abs(p) < 1 for p in ps)
        w2 = sum(abs(p) < 2 for p in ps)
        mean = sum(ps) / len(ps)
        rms = math.sqrt(sum(p * p for p in ps) / len(ps))
        print(f"  {m:<14} {ff:<3} {len(ps):3d} {w1 / len(ps):.2f} {w2 / len(ps):.2f} "
              f"{mean:+.2f} {rms:.2f}")
    print("weights in the final values at the shells: estimator, mean weight, times excluded")
    for m in sorted(weights):
        ws = weights[m]
        print(f"  {m:<14} {sum(ws) / len(ws):.3f} {excluded.get(m, 0):3d}/{len(ws)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
