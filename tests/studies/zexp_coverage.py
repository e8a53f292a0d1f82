"""Pulls of the Q² fits' derived values (derived.csv) against the mock truth, per seed
directory (see zexp_coverage.sh).

The truth comes from the mock's own form-factor model in truth.yaml (analytic, not a fit):
a dipole `G0 / (1 + Q²/M²)²` has `G(0) = G0` and `r² = 12/M²`; a z-expansion
`sum_k a_k z^k` has `G(0) = sum_k a_k z(0)^k` and `r² = -6 G'(0)/G(0)` with
`dz/dQ²(0) = sqrt(t_cut - t0) / (sqrt(t_cut) (sqrt(t_cut) + sqrt(t_cut - t0))²)`
(Hill & Paz, Phys. Rev. D 82 (2010) 113005); radii in fm through the lattice spacing.
An honest error gives 68.3 % within 1 sigma, 95.4 % within 2 sigma, pull rms 1.
Printed per method, model and quantity: n, share within 1 and 2 sigma, mean pull, pull rms,
and for the z-expansion the median over seeds of its error over the dipole's error.
Also printed: the pulls of the form-factor points the Q² fits use (formfactors.csv, per
method and form factor, every shell against the model's value at the shell's Q² from the
truth points with p_f = 0), which tell a bias of the estimator from one of the Q² fit.
A radius is missing from derived.csv when `r²` is not positive on some resample, so `n` of
`r_X` can be below the number of runs; `r2_X` (fm²) is always there.
"""
import csv
import math
import os
import statistics
import sys

import yaml
from mock_truth import shell_truth


def z_of(q2, t_cut, t0):
    s, c = math.sqrt(t_cut + q2), math.sqrt(t_cut - t0)
    return (s - c) / (s + c)


def truth_of(model, a_fm):
    """(G(0), r in fm) of one form-factor model of truth.yaml, or None."""
    if model["model"] == "dipole":
        return model["value_at_zero"], math.sqrt(12.0) / model["mass"] * a_fm
    if model["model"] == "z_expansion":
        t_cut, t0 = model["t_cut"], model.get("t0", 0.0)
        coeff = model["coefficients"]
        z0 = z_of(0.0, t_cut, t0)
        g0 = sum(a * z0**k for k, a in enumerate(coeff))
        dgdz = sum(k * a * z0 ** (k - 1) for k, a in enumerate(coeff) if k > 0)
        s, c = math.sqrt(t_cut), math.sqrt(t_cut - t0)
        dz = c / (s * (s + c) ** 2)
        r2 = -6.0 * dgdz * dz / g0
        return g0, math.sqrt(r2) * a_fm if r2 > 0 else None
    return None


def point_pulls(run, truth, methods, out):
    """Pulls of the points in formfactors.csv, appended to out[(method, form factor)]."""
    want = shell_truth(truth)
    with open(os.path.join(run, "formfactors.csv")) as f:
        for row in csv.DictReader(f):
            if row["method"] not in methods or not row["shell"]:
                continue
            key = (row["form_factor"], int(row["shell"].split("nq2=")[1]))
            err = float(row["error_stat"])
            if key in want and err > 0:
                out.setdefault((row["method"], key[0]), []).append(
                    (float(row["value"]) - want[key]) / err)


def summary(ps):
    """n, share within 1 and 2, mean, rms."""
    n = len(ps)
    return (n, sum(abs(p) < 1 for p in ps) / n, sum(abs(p) < 2 for p in ps) / n,
            sum(ps) / n, math.sqrt(sum(p * p for p in ps) / n))


def main():
    work = sys.argv[1]
    methods = sys.argv[2:] or ["two_state"]
    pulls = {}  # (method, quantity, model) -> [pull]
    errors = {}  # (method, quantity, model, seed) -> error
    seeds = []
    points = {}  # (method, form factor) -> pulls of the fitted points
    for seed_dir in sorted(os.listdir(work)):
        d = os.path.join(work, seed_dir)
        derived = os.path.join(d, "run", "derived.csv")
        if not os.path.exists(derived):
            continue
        with open(os.path.join(d, "data", "truth.yaml")) as f:
            truth = yaml.safe_load(f)
        seeds.append(truth["seed"])
        point_pulls(os.path.join(d, "run"), truth, methods, points)
        a_fm = truth["lattice"]["a_fm"]
        want = {}
        for name, model in truth["form_factors"].items():
            t = truth_of(model, a_fm)
            if t is None:
                continue
            want[f"{name}(0)"] = t[0]
            if t[1] is not None:
                want[f"r_{name}"] = t[1]
                want[f"r2_{name}"] = t[1] ** 2
        with open(derived) as f:
            for row in csv.DictReader(f):
                q = row["quantity"]
                if row["method"] not in methods or q not in want:
                    continue
                err = float(row["error"])
                if not err > 0:
                    continue
                key = (row["method"], q, row["model"])
                pulls.setdefault(key, []).append((float(row["value"]) - want[q]) / err)
                errors[key + (seed_dir,)] = err
    if not pulls:
        print("no pulls")
        return 1
    print(f"{len(seeds)} runs, seeds {min(seeds)}..{max(seeds)}")
    print(f"{'method':<12} {'quantity':<8} {'model':<12} {'n':>3} {'1sigma':>6} {'2sigma':>6} "
          f"{'mean':>6} {'rms':>5}  err/dipole")
    for key in sorted(pulls):
        n, w1, w2, mean, rms = summary(pulls[key])
        ratio = ""
        if key[2] == "z-expansion":
            r = [errors[key + (s,)] / errors[(key[0], key[1], "dipole", s)]
                 for (m, q, mo, s) in errors
                 if (m, q, mo) == key and (m, q, "dipole", s) in errors]
            if r:
                ratio = f"{statistics.median(r):.2f}"
        print(f"{key[0]:<12} {key[1]:<8} {key[2]:<12} {n:3d} {w1:6.2f} {w2:6.2f} "
              f"{mean:+6.2f} {rms:5.2f}  {ratio}")
    print("the points the fits use (every shell, statistical error):")
    for key in sorted(points):
        n, w1, w2, mean, rms = summary(points[key])
        print(f"{key[0]:<12} {key[1]:<8} {'points':<12} {n:3d} {w1:6.2f} {w2:6.2f} "
              f"{mean:+6.2f} {rms:5.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
