"""Where the spectrum's first excited energy loses its honesty (issue 13): over kept coverage
runs (`FF_KEEP` of final_coverage.sh), the pulls of `E_1` against the mock's truth (continuum
dispersion of the spec's second state) per `|n|²`, for

  - the `E_1` that `spectrum.csv` quotes (since December 3 the average over the multi-state
    fits, before the single highest-weight multi-state fit), split by the `t_min` of the
    highest-weight multi-state fit (the table's `t_min` column);
  - every fixed two-state window of `spectrum_fits.csv` alone (each with its robust error);
  - the Jay–Neil average of `E_1` over the included multi-state fits recomputed from
    `spectrum_fits.csv` (weights renormalised among them, variance Σ w σ² + spread of means).

    python3 tests/studies/excited_windows.py DIR

Printed per row: count, mean pull, pull rms, spread over seeds / rms quoted error (fixed
windows), within 1 and 2σ. Needs python3 with numpy and PyYAML.
"""
import csv
import glob
import math
import sys
from collections import defaultdict

import numpy as np
import yaml


def main():
    rows = defaultdict(list)
    for d in sorted(glob.glob(sys.argv[1] + '/s*/')):
        try:
            spec = yaml.safe_load(open(d + 'spec.yaml'))
            fits = list(csv.DictReader(open(d + 'run/spectrum_fits.csv')))
            quoted = list(csv.DictReader(open(d + 'run/spectrum.csv')))
        except FileNotFoundError:
            continue
        L = spec['ensemble']['L']
        masses = [s['mass'] for s in spec['hadron']['states']]
        by_momentum = defaultdict(list)
        for r in fits:
            by_momentum[(r['px'], r['py'], r['pz'])].append(r)
        for r in quoted:
            if r['state'] != '1':
                continue
            k = (r['px'], r['py'], r['pz'])
            n2 = sum(int(x) ** 2 for x in k)
            truth = math.sqrt(masses[1] ** 2 + n2 * (2 * math.pi / L) ** 2)
            e, s = float(r['energy']), float(r['error'])
            rows[(n2, 'spectrum.csv')].append((e, s, truth))
            rows[(n2, f'spectrum.csv, best t_min={r["t_min"]}')].append((e, s, truth))
            multi = [f for f in by_momentum[k]
                     if int(f['n_states']) >= 2 and f['included'] == 'yes'
                     and float(f['weight']) > 0]
            for f in by_momentum[k]:
                if int(f['n_states']) == 2 and f['e1'] != 'NaN':
                    rows[(n2, f'fixed t_min={f["t_min"]}')].append(
                        (float(f['e1']), float(f['e1_error']), truth))
            if multi:
                w = np.array([float(f['weight']) for f in multi])
                w /= w.sum()
                mu = np.array([float(f['e1']) for f in multi])
                sg = np.array([float(f['e1_error']) for f in multi])
                m = (w * mu).sum()
                v = (w * sg ** 2).sum() + (w * mu ** 2).sum() - m * m
                rows[(n2, 'average over multi-state fits')].append((m, math.sqrt(v), truth))
    for (n2, label), xs in sorted(rows.items()):
        a = np.array(xs)
        p = (a[:, 0] - a[:, 2]) / a[:, 1]
        spread = a[:, 0].std(ddof=1) / math.sqrt((a[:, 1] ** 2).mean()) if len(a) > 1 else math.nan
        print(f'|n|²={n2} {label:34s} n {len(a):5d} mean {p.mean():+.2f} rms '
              f'{math.sqrt((p * p).mean()):5.2f} spread/err {spread:.2f} '
              f'within 1σ {np.mean(abs(p) < 1):.3f} 2σ {np.mean(abs(p) < 2):.3f}')
    return 0 if rows else 1


if __name__ == '__main__':
    sys.exit(main())
