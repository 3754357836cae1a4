#!/usr/bin/env python3
"""Golden values for cwaudit's Mann-Whitney U test (src/compare.rs).

Writes fixtures/mannwhitney_golden.json: for a handful of sample pairs (the
samples themselves are stored, so the random generator only has to be run
once), scipy.stats.mannwhitneyu(x, y, use_continuity=True,
alternative="two-sided", method="asymptotic"): the U statistic of x and the
p-value of the normal approximation with tie correction. Also
scipy.stats.norm.sf at a few z, for the normal tail used by that p-value.
tests/compare.rs reads the fixture; CI has no scipy.

Run by hand from the crate root, then commit the fixture:

    /tmp/venv/bin/python scripts/golden_mannwhitney.py
"""

import json
import os
import sys

import numpy as np
import scipy
import scipy.stats

OUT = os.path.join("fixtures", "mannwhitney_golden.json")


def cases():
    rng = np.random.default_rng(20240501)
    yield "shift, no ties, 10 vs 12", rng.normal(0, 1, 10), rng.normal(0.8, 1, 12)
    yield "heavy ties (rounded to 0.5), 25 vs 30", np.round(
        rng.normal(5, 1, 25) * 2
    ) / 2, np.round(rng.normal(5.4, 1, 30) * 2) / 2
    yield "rise times 3 ms vs 6 ms, 40 vs 42", rng.normal(3, 0.1, 40), rng.normal(
        6, 0.1, 42
    )
    yield "same distribution, 42 vs 42", rng.normal(-12, 0.05, 42), rng.normal(
        -12, 0.05, 42
    )
    yield "unequal sizes 5 vs 30", rng.normal(1, 1, 5), rng.normal(0, 1, 30)
    yield "one sample a copy of the other, 9 vs 9", *(lambda a: (a, a.copy()))(
        rng.normal(0, 1, 9)
    )
    yield "half zeros (chirp-like), 20 vs 20", np.concatenate(
        [np.zeros(10), rng.uniform(0, 3, 10)]
    ), np.concatenate([np.zeros(14), rng.uniform(0, 3, 6)])
    yield "all values equal, 6 vs 7", np.zeros(6), np.zeros(7)


def main():
    if not os.path.isdir("fixtures"):
        sys.exit("run from the crate root (fixtures/ not found)")
    out = {
        "source": f"scipy.stats.mannwhitneyu (scipy {scipy.__version__}, numpy {np.__version__}), "
        "use_continuity=True, alternative='two-sided', method='asymptotic'",
        "scipy_version": scipy.__version__,
        "cases": [],
        "norm_sf": [],
    }
    for name, x, y in cases():
        x = [float(v) for v in x]
        y = [float(v) for v in y]
        with np.errstate(all="ignore"):
            r = scipy.stats.mannwhitneyu(
                x, y, use_continuity=True, alternative="two-sided", method="asymptotic"
            )
        out["cases"].append(
            {"name": name, "x": x, "y": y, "u": float(r.statistic), "p": float(r.pvalue)}
        )
    for z in [-3.0, -0.5, 0.0, 0.3, 1.0, 1.959963984540054, 2.5758293035489004, 4.0, 6.0, 9.0]:
        out["norm_sf"].append({"z": z, "sf": float(scipy.stats.norm.sf(z))})
    with open(OUT, "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")
    for c in out["cases"]:
        print(f'{c["name"]}: U = {c["u"]}, p = {c["p"]:.6g}')


if __name__ == "__main__":
    main()
