"""Reference two-way ANOVA (individual, operator, interaction) for tests/evolution_reference.rs.

Input: one JSON argument {"data": [[row of p variables], ...], "individual": [...],
"operator": [...]}.
Output: {"terms": {term: {"ss": sum over columns, "df": per column}}, "columns": [{term:
{"ss", "df", "F", "p"}}]} with terms "individual", "operator", "individual:operator",
"residual".

Each column is fitted as y ~ C(individual) + C(operator) + C(individual):C(operator) with
statsmodels.formula.api.ols and decomposed by statsmodels.stats.anova.anova_lm(typ=1)
(sequential sums of squares; reference: statsmodels 0.14+, statsmodels/stats/anova.py).
"""

import json
import sys

import numpy as np
import pandas as pd
import statsmodels.formula.api as smf
from statsmodels.stats.anova import anova_lm

NAMES = {
    "C(individual)": "individual",
    "C(operator)": "operator",
    "C(individual):C(operator)": "individual:operator",
    "Residual": "residual",
}


def main():
    inp = json.loads(sys.argv[1])
    data = np.asarray(inp["data"], dtype=float)
    cols = []
    totals = {}
    for j in range(data.shape[1]):
        df = pd.DataFrame(
            {
                "y": data[:, j],
                "individual": [str(v) for v in inp["individual"]],
                "operator": [str(v) for v in inp["operator"]],
            }
        )
        fit = smf.ols("y ~ C(individual) + C(operator) + C(individual):C(operator)", data=df).fit()
        table = anova_lm(fit, typ=1)
        col = {}
        for key, name in NAMES.items():
            row = table.loc[key]
            col[name] = {
                "ss": float(row["sum_sq"]),
                "df": float(row["df"]),
                "F": None if np.isnan(row["F"]) else float(row["F"]),
                "p": None if np.isnan(row["PR(>F)"]) else float(row["PR(>F)"]),
            }
            t = totals.setdefault(name, {"ss": 0.0, "df": float(row["df"])})
            t["ss"] += float(row["sum_sq"])
        cols.append(col)
    print(json.dumps({"terms": totals, "columns": cols}))


if __name__ == "__main__":
    main()
