"""Reference covariances and correlations of the demo data, computed with numpy.

Reads the two demo waves exactly as the demo spec declares them (missing code -9, item pu4
reversed on [1, 5], rows of both waves stacked), then for every item pair takes the rows where
both values are present (pairwise deletion) and applies numpy.cov (ddof=1) and numpy.corrcoef.
Also writes the listwise version. Run from the repository root:

    python3 tests/reference/demo-moments/make_fixture.py
"""
import json
import pathlib
import sys

import numpy as np
import pyarrow
import pyarrow.csv
import pyarrow.parquet

root = pathlib.Path(__file__).resolve().parents[3]
demo = root / "pipelines" / "transit"
items = ["cr1", "cr2", "cr3", "cr4", "cr5", "pu1", "pu2", "pu3", "pu4", "pu5",
         "tr1", "tr2", "tr3", "tr4", "tr5", "tr6", "fare_share", "in1", "in2", "in3", "in4"]


def column(table, name):
    values = table.column(name).to_pylist()
    return np.array([np.nan if v is None else float(v) for v in values])


tables = [pyarrow.csv.read_csv(demo / "data" / "riders-spring.csv"),
          pyarrow.parquet.read_table(demo / "data" / "riders-autumn.parquet")]
data = np.column_stack([np.concatenate([column(t, i) for t in tables]) for i in items])
data[data == -9] = np.nan
k = items.index("pu4")
data[:, k] = 1 + 5 - data[:, k]

p = len(items)
cov = np.zeros((p, p))
cor = np.eye(p)
n = np.zeros((p, p), dtype=int)
for a in range(p):
    for b in range(a, p):
        ok = ~np.isnan(data[:, a]) & ~np.isnan(data[:, b])
        x, y = data[ok, a], data[ok, b]
        c = np.cov(x, y, ddof=1)
        cov[a, b] = cov[b, a] = c[0, 1]
        n[a, b] = n[b, a] = int(ok.sum())
        if a != b:
            cor[a, b] = cor[b, a] = np.corrcoef(x, y)[0, 1]

complete = ~np.isnan(data).any(axis=1)
listwise_cov = np.cov(data[complete], rowvar=False, ddof=1)
listwise_cor = np.corrcoef(data[complete], rowvar=False)

out = {
    "source": "numpy.cov / numpy.corrcoef on the demo waves, pairwise and listwise deletion",
    "versions": {"python": sys.version.split()[0], "numpy": np.__version__, "pyarrow": pyarrow.__version__},
    "items": items,
    "pairwise": {"covariance": cov.tolist(), "correlation": cor.tolist(), "n": n.tolist()},
    "listwise": {"covariance": listwise_cov.tolist(), "correlation": listwise_cor.tolist(),
                 "n": int(complete.sum())},
}
(pathlib.Path(__file__).parent / "moments.json").write_text(json.dumps(out, indent=1) + "\n")
print("wrote moments.json:", p, "items,", data.shape[0], "rows,", int(complete.sum()), "complete")
