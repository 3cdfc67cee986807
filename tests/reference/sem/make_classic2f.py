"""Two-factor ML CFA reference fit on a classic published covariance matrix, for the Rust tests.

Matrix: R's base `datasets::ability.cov` (six ability tests, n.obs = 112), read by running
`Rscript -e 'dput(ability.cov)'` and stored verbatim with the R version.
Model: correlated factors, unit latent variances, every item on exactly one factor, no error
covariances. The standard simple-structure reading of these tests is a spatial factor
(picture, blocks, maze) and a verbal factor (reading, vocab); `general` is a broad test that
loads on both in an unrotated two-factor solution, so both placements are fitted here and the
one with the smaller F (the better-fitting simple structure) is the main case; the other is kept
as `alternative` for a second check.
Fit: F = ln|Sigma| + tr(S Sigma^-1) - ln|S| - p minimised by scipy.optimize (BFGS with the
analytic gradient), reusing the independent fitting code of make_fixtures.py in this folder.
Run: python3 make_classic2f.py   (writes classic2f.json here)
"""

import json
import re
import subprocess
from pathlib import Path

import numpy as np

from make_fixtures import case, versions

HERE = Path(__file__).resolve().parent

NAMES = ["general", "picture", "blocks", "maze", "reading", "vocab"]


def read_ability_cov():
    """The matrix, n.obs, R's dput text and R version, straight from Rscript."""
    script = ("x <- datasets::ability.cov; cat(R.version.string, '\\n'); "
              "cat(sprintf('%.17g', as.vector(x$cov)), '\\n'); cat(x$n.obs, '\\n'); "
              "cat(dimnames(x$cov)[[1]], '\\n'); dput(x)")
    out = subprocess.run(["Rscript", "-e", script], check=True, capture_output=True, text=True).stdout
    lines = out.splitlines()
    r_version = lines[0].strip()
    values = [float(v) for v in lines[1].split()]
    n_obs = int(lines[2].split()[0])
    names = lines[3].split()
    dput = "\n".join(lines[4:])
    p = len(names)
    cov = np.array(values).reshape((p, p), order="F")  # R stores matrices column-major
    assert names == NAMES, names
    assert np.allclose(cov, cov.T)
    return cov, n_obs, dput, r_version


def main():
    cov, n, dput, r_version = read_ability_cov()
    idx = {name: i for i, name in enumerate(NAMES)}
    spatial = ["picture", "blocks", "maze"]
    verbal = ["reading", "vocab"]
    fits = {}
    for where in ("verbal", "spatial"):
        f_spatial = spatial + (["general"] if where == "spatial" else [])
        f_verbal = verbal + (["general"] if where == "verbal" else [])
        groups = [sorted(idx[x] for x in f_spatial), sorted(idx[x] for x in f_verbal)]
        desc = {"p": 6, "groups": groups, "identification": "unit_latent_variance"}
        res = case(desc, cov, n)
        res["general_on"] = where
        res["factor_items"] = {"spatial": f_spatial, "verbal": f_verbal}
        fits[where] = res
    best = min(fits, key=lambda k: fits[k]["F"])
    other = "spatial" if best == "verbal" else "verbal"
    doc = {
        "generator": "make_classic2f.py",
        "source": "R datasets::ability.cov",
        "r_version": r_version,
        "r_dput": dput,
        "names": NAMES,
        "versions": versions(),
        "main": fits[best],
        "alternative": fits[other],
    }
    (HERE / "classic2f.json").write_text(json.dumps(doc, indent=1))
    for k, v in fits.items():
        print(f"general on {k}: F = {v['F']:.10f}, gradient max {v['gradient_max']:.2e}")


if __name__ == "__main__":
    main()
