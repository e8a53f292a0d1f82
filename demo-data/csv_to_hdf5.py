"""Write a CSV ensemble (twopt.csv, threept.csv) as per-configuration HDF5 files, the layout a
contraction code would write. Used for the pion demo (pipelines/pion-vector-hdf5.yaml) and by
the HDF5 benchmark (benches/hdf5.sh).

Needs h5py and numpy (e.g. `python3 -m venv /tmp/h5 && /tmp/h5/bin/pip install h5py numpy`).
From the repository root:
    /tmp/h5/bin/python demo-data/csv_to_hdf5.py demo-data/pion demo-data/pion-hdf5
Values are parsed from the CSV text (correctly rounded, as formfactory parses them), so a run
from these files gives the CSV run's results bit for bit. Tables with `source`, `smear`,
`flavor` or `diagram` columns are not handled (the demo and benchmark ensembles have none).

Layout of OUT/cfg{config}.h5, complex values as numpy complex128 (h5py's compound {r, i}),
flat names (nested groups work the same way but make small files larger):
  /c2pt_p{px}_{py}_{pz}                                             (T,)
  /c3pt_dt{tsep}_{current}_{projector}_pf{pfx}_{pfy}_{pfz}_q{qx}_{qy}_{qz}   (tsep + 1,)
"""
import csv
import os
import shutil
import sys
from collections import defaultdict

import h5py
import numpy as np


def read(path, key_cols, time_col):
    out = defaultdict(dict)  # config -> {key: {t: complex}}
    with open(path, newline="") as f:
        for r in csv.DictReader(f):
            for col in ("source", "smear", "flavor", "diagram"):
                if r.get(col):
                    sys.exit(f"{path}: column `{col}` is not handled by this script")
            key = tuple(r[c] for c in key_cols)
            out[int(r["config"])].setdefault(key, {})[int(r[time_col])] = complex(
                float(r["re"]), float(r["im"])
            )
    return out


def main():
    src, dst = sys.argv[1], sys.argv[2]
    two = read(os.path.join(src, "twopt.csv"), ("px", "py", "pz"), "t")
    three = read(
        os.path.join(src, "threept.csv"),
        ("tsep", "current", "projector", "pfx", "pfy", "pfz", "qx", "qy", "qz"),
        "tau",
    )
    # Replace only an earlier output of this script (nothing but cfg*.h5 files): any other
    # directory is refused, never deleted.
    if os.path.isdir(dst):
        foreign = [n for n in os.listdir(dst) if not (n.startswith("cfg") and n.endswith(".h5"))]
        if foreign:
            sys.exit(f"{dst} holds files this script did not write ({foreign[:3]}): refused")
        shutil.rmtree(dst)
    os.makedirs(dst)
    for cfg in sorted(two):
        with h5py.File(os.path.join(dst, f"cfg{cfg}.h5"), "w", libver="v110") as f:
            for (px, py, pz), vals in sorted(two[cfg].items()):
                data = np.array([vals[t] for t in range(len(vals))])
                f.create_dataset(f"c2pt_p{px}_{py}_{pz}", data=data)
            for key, vals in sorted(three[cfg].items()):
                tsep, cur, proj, pfx, pfy, pfz, qx, qy, qz = key
                data = np.array([vals[t] for t in range(int(tsep) + 1)])
                name = f"c3pt_dt{tsep}_{cur}_{proj}_pf{pfx}_{pfy}_{pfz}_q{qx}_{qy}_{qz}"
                f.create_dataset(name, data=data)


if __name__ == "__main__":
    main()
