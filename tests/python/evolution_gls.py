"""Independent reference values for the comparative methods of tests/evolution_reference.rs,
written from the published formulas with numpy and scipy (no comparative-methods package).

Input: one JSON argument {"newick": path, "tips": [tip labels, the data's row order],
"data": [[row], ...], "groups": [group per row] or null, "eb_r": float, "ou_alpha": float}.

The tree is read with DendroPy (as in evolution_newick.py); the Brownian covariance C[i][j] is
the root-to-MRCA distance, computed from the ancestors of each tip. Then:
- sigma_mult = trace(R)/p, R = (Y - 1a)' C^-1 (Y - 1a) / n, a = GLS root (Adams 2014, Syst.
  Biol. 63:166; O'Meara et al. 2006);
- group rates: the same on each group's rows with C restricted to them;
- k_mult = [tr((Y-1a)'(Y-1a)) / tr((Y-1a)'C^-1(Y-1a))] / [(tr C - n/(1'C^-1 1))/(n-1)]
  (Adams 2014, Syst. Biol. 63:685; Blomberg et al. 2003);
- cl_bm, cl_eb(r), cl_ou(alpha): the pairwise composite log-likelihood (Goolsby 2016), each
  pair's bivariate normal log-density of vec(Y_ij) with covariance R_ij kron C evaluated by
  scipy.stats.multivariate_normal, R_ij the ML 2x2 block and the GLS root (the profile);
  EB: C_ij = (exp(r s_ij) - 1)/r (Harmon et al. 2010); OU: C_ij = exp(-alpha (T_i + T_j -
  2 s_ij)) (1 - exp(-2 alpha s_ij)) / (2 alpha) (Hansen 1997);
- eb_best, ou_best: the maximising r in [ln(1e-5)/H, 0] and alpha in [0, ln2/(0.01 H)] by
  scipy.optimize.minimize_scalar(method="bounded");
- adjustment: c = tr(W R W R)/(2P) with W the sum of the pairs' 2x2 inverses of R (BM fit);
- ancestral: GLS states at every internal node (preorder), a + C_at C^-1 (Y - 1a).
"""

import itertools
import json
import sys

import dendropy
import numpy as np
from scipy.optimize import minimize_scalar
from scipy.stats import multivariate_normal


def read(path):
    return dendropy.Tree.get(
        path=path, schema="newick", preserve_underscores=True, rooting="force-rooted"
    )


def depth(node):
    d = 0.0
    while node.parent_node is not None:
        d += node.edge.length or 0.0
        node = node.parent_node
    return d


def ancestors(node):
    out = []
    while node is not None:
        out.append(node)
        node = node.parent_node
    return out


def shared(a, b):
    anc = set(id(x) for x in ancestors(a))
    for x in ancestors(b):
        if id(x) in anc:
            return depth(x)
    return 0.0


def gls(c, y):
    ci = np.linalg.inv(c)
    one = np.ones(len(c))
    a = (one @ ci @ y) / (one @ ci @ one)
    e = y - a
    return a, e, ci


def cl(c, y):
    n, p = y.shape
    a, e, ci = gls(c, y)
    r = e.T @ ci @ e / n
    total = 0.0
    for i, j in itertools.combinations(range(p), 2):
        rij = r[np.ix_([i, j], [i, j])]
        cov = np.kron(rij, c)
        x = np.concatenate([y[:, i], y[:, j]])
        mean = np.concatenate([np.full(n, a[i]), np.full(n, a[j])])
        total += multivariate_normal(mean, cov).logpdf(x)
    return total, r


def main():
    inp = json.loads(sys.argv[1])
    tree = read(inp["newick"])
    leaves = {leaf.taxon.label: leaf for leaf in tree.leaf_node_iter()}
    order = [leaves[t] for t in inp["tips"]]
    n = len(order)
    s = np.array([[shared(a, b) for b in order] for a in order])
    tt = np.diag(s).copy()
    y = np.asarray(inp["data"], dtype=float)
    p = y.shape[1]
    a, e, ci = gls(s, y)
    r = e.T @ ci @ e / n
    out = {"sigma_mult": float(np.trace(r) / p)}
    if inp.get("groups"):
        groups = {}
        for g in sorted(set(inp["groups"])):
            idx = [k for k, h in enumerate(inp["groups"]) if h == g]
            sg = s[np.ix_(idx, idx)]
            _, eg, cgi = gls(sg, y[idx])
            groups[g] = float(np.trace(eg.T @ cgi @ eg) / (len(idx) * p))
        out["group_rates"] = groups
    one = np.ones(n)
    expected = (np.trace(s) - n / (one @ ci @ one)) / (n - 1)
    out["k_mult"] = float((np.sum(e * e) / np.trace(e.T @ ci @ e)) / expected)

    def eb(rr):
        return s.copy() if rr == 0 else np.expm1(rr * s) / rr

    def ou(al):
        if al == 0:
            return s.copy()
        return (
            np.exp(-al * (tt[:, None] + tt[None, :] - 2 * s))
            * -np.expm1(-2 * al * s)
            / (2 * al)
        )

    out["cl_bm"], r_bm = cl(s, y)
    out["cl_eb"] = cl(eb(inp["eb_r"]), y)[0]
    out["cl_ou"] = cl(ou(inp["ou_alpha"]), y)[0]
    h = tt.max()
    res = minimize_scalar(
        lambda rr: -cl(eb(rr), y)[0],
        bounds=(np.log(1e-5) / h, 0.0),
        method="bounded",
        options={"xatol": 1e-8},
    )
    out["eb_best"] = float(res.x)
    out["cl_eb_best"] = float(-res.fun)
    res = minimize_scalar(
        lambda al: -cl(ou(al), y)[0],
        bounds=(0.0, np.log(2) / (0.01 * h)),
        method="bounded",
        options={"xatol": 1e-8},
    )
    out["ou_best"] = float(res.x)
    out["cl_ou_best"] = float(-res.fun)
    w = np.zeros((p, p))
    pairs = list(itertools.combinations(range(p), 2))
    for i, j in pairs:
        inv = np.linalg.inv(r_bm[np.ix_([i, j], [i, j])])
        w[np.ix_([i, j], [i, j])] += inv
    m = w @ r_bm
    out["adjustment"] = float(np.trace(m @ m) / (2 * len(pairs)))
    # ancestral states at internal nodes in preorder (children in file order)
    internal = [nd for nd in tree.preorder_node_iter() if not nd.is_leaf()]
    z = ci @ (y - a)
    anc = []
    for nd in internal:
        cat = np.array([shared(nd, t) if nd not in ancestors(t) else depth(nd) for t in order])
        anc.append((a + cat @ z).tolist())
    out["ancestral"] = anc
    print(json.dumps(out))


if __name__ == "__main__":
    main()
