"""Reference one-way ANOVA for tests/shape2_reference.rs.

Input: one JSON argument {"data": [[row of p variables], ...], "labels": [individual id, ...]}.
Output: {"ss_individual": sum over columns, "ss_error": sum over columns,
         "columns": [{"ss_individual", "ss_error", "df_individual", "df_error", "F", "p"}, ...]}

Each column is fitted as y ~ C(individual) with statsmodels.formula.api.ols and decomposed by
statsmodels.stats.anova.anova_lm (type I sums of squares; with one factor all types agree)
(reference: statsmodels 0.14+, statsmodels/stats/anova.py).
"""

import json
import sys

import numpy as np
import pandas as pd
import statsmodels.formula.api as smf
from statsmodels.stats.anova import anova_lm


def main():
    inp = json.loads(sys.argv[1])
    data = np.asarray(inp["data"], dtype=float)
    labels = [str(v) for v in inp["labels"]]
    cols = []
    for j in range(data.shape[1]):
        df = pd.DataFrame({"y": data[:, j], "individual": labels})
        table = anova_lm(smf.ols("y ~ C(individual)", data=df).fit())
        ind = table.loc["C(individual)"]
        res = table.loc["Residual"]
        cols.append(
            {
                "ss_individual": float(ind["sum_sq"]),
                "ss_error": float(res["sum_sq"]),
                "df_individual": float(ind["df"]),
                "df_error": float(res["df"]),
                "F": float(ind["F"]),
                "p": float(ind["PR(>F)"]),
            }
        )
    print(
        json.dumps(
            {
                "ss_individual": sum(c["ss_individual"] for c in cols),
                "ss_error": sum(c["ss_error"] for c in cols),
                "columns": cols,
            }
        )
    )


if __name__ == "__main__":
    main()
