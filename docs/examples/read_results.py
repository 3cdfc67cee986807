#!/usr/bin/env python3
"""Reads a construe results.json into pandas data frames: loadings, fit, edges with their
bootstrap shares, effects with their intervals (docs/results-in-r-and-python.md).

    python3 docs/examples/read_results.py reports/transit-rider-panel/v1/results.json

Prints each table as CSV under a `== name ==` line. Needs pandas.
"""

import json
import sys

import pandas as pd

with open(sys.argv[1], encoding="utf-8") as f:
    r = json.load(f)
assert r["results_format"].split(".")[0] == "1", "written for results.json format 1.x"

# Loadings: one row per construct and kept item.
loadings = pd.DataFrame(
    [{"construct": c, "item": i, **est} for c, items in r["measure"]["loadings"].items() for i, est in items.items()]
)

# Fit of the measurement model and of the structural model.
fits = {"measure": r["measure"]["fit"], "structure": r.get("structure", {}).get("fit")}
fit = pd.DataFrame([{"model": m, **f} for m, f in fits.items() if f])
fit[["rmsea_lo", "rmsea_hi"]] = pd.DataFrame(fit.pop("rmsea_ci").tolist())

# Edges of the structure, with how often the bootstrap found each pair adjacent (the bootstrap
# lists each pair once, in name order; `forward` is the share oriented its `from -> to`).
edges = pd.DataFrame(r["structure"]["edges"])
if "resample" in r:
    boot = pd.DataFrame(r["resample"]["edges"])
    swapped = boot.rename(columns={"from": "to", "to": "from", "forward": "backward", "backward": "forward"})
    boot = pd.concat([boot, swapped]).rename(
        columns={"present": "boot_present", "forward": "boot_same", "backward": "boot_reversed"}
    )
    edges = edges.merge(boot, on=["from", "to"], how="left")

# Effects with their 95% intervals: Wald (`ci`) and, with resample, bootstrap percentiles.
effects = pd.DataFrame(r["structure"]["effects"])
effects[["ci_lower", "ci_upper"]] = pd.DataFrame(effects.pop("ci").tolist())
if "resample" in r:
    boot = pd.DataFrame(r["resample"]["effects"])
    boot[["boot_ci_lower", "boot_ci_upper"]] = pd.DataFrame(boot.pop("ci").tolist())
    boot = boot.drop(columns="std_ci").rename(columns={"replicates": "boot_replicates"})
    effects = effects.merge(boot, on=["from", "to"], how="left")

for name, table in [("loadings", loadings), ("fit", fit), ("edges", edges), ("effects", effects)]:
    print(f"== {name} ==")
    print(table.to_csv(index=False), end="")
