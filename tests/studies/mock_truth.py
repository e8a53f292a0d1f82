"""The mock truth of form factors at the shells of a nucleon study (shared by the studies)."""


def shell_truth(truth):
    """(form factor, nq2) -> true value at the truth point with p_f = 0 and |q|^2 = nq2 (the
    first such point: every point of one shell has the same Q^2 at p_f = 0)."""
    out = {}
    for p in truth["points"]:
        if p["pf"] != [0, 0, 0]:
            continue
        nq2 = sum(c * c for c in p["q"])
        for name, v in p["form_factors"].items():
            out.setdefault((name, nq2), v)
    return out
