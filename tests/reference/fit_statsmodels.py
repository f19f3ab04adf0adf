"""Least squares and logistic regression through upshot against outside references, twice:
through the finisher alone (sums formed in memory by the `fit-cases` binary) and through the
in-database path (`fit-cases --in-db`: profile, centred Gram, residual and logistic passes built by
upshot_sql and run by DuckDB on a CSV file, then finished by upshot_fit).

1. NIST Statistical Reference Datasets, linear regression, Longley (1967): certified coefficients
   (quoted in shared/references.md from memory and reproduced there with statsmodels). The data
   ships with statsmodels (`statsmodels.datasets.longley`). Required: at least 9 correct
   significant digits (log relative error, LRE, as NIST reports it) for every coefficient.
2. statsmodels OLS on the same rows (Longley; the committed demo sample): coefficients to a
   relative 1e-8, classical and HC1 standard errors (statsmodels `cov_type="HC1"`) to a
   relative 1e-6.
3. A perfectly collinear design must be refused with the columns named.
4. Logistic regression by Newton's method over aggregate sums (`upshot_fit::logit`) against
   statsmodels Logit (maximum likelihood) on the demo sample's voucher targeting:
   coefficients to a relative 1e-8, standard errors (inverse information) to 1e-6,
   log-likelihood to 1e-10. Perfectly separated data must be refused, naming the column.

With `--postgres LOCATOR`, the in-database checks run a third time with every pass in PostgreSQL
(fit-cases loads the CSV's columns into a table there: UPSHOT_FIT_DB).

Usage: fit_statsmodels.py PATH/TO/fit-cases [--postgres postgresql://...]
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
from statsmodels.datasets import longley

# NIST StRD Longley certified values (quoted from memory in shared/references.md).
CERTIFIED = {
    "const": -3482258.63459582,
    "GNPDEFL": 15.0618722713733,
    "GNP": -0.0358191792925910,
    "UNEMP": -2.02022980381683,
    "ARMED": -1.03322686717359,
    "POP": -0.0511041056535807,
    "YEAR": 1829.15146461355,
}

passed = failed = 0


def check(ok, what):
    global passed, failed
    if ok:
        passed += 1
    else:
        failed += 1
        print("FAIL", what)


MODES = [[], ["--in-db"]]
MODE = []
POSTGRES = None  # with --postgres LOCATOR: a third pass, the in-database path on PostgreSQL
ENV = None


def run(binary, frame, outcome, covariates, logistic=False):
    with tempfile.NamedTemporaryFile("w", suffix=".csv", delete=False) as f:
        frame.to_csv(f, index=False, float_format="%.17g")
        path = f.name
    try:
        flags = MODE + (["--logit"] if logistic else [])
        out = subprocess.run([binary, *flags, path, outcome, *covariates], check=True, capture_output=True, text=True,
                             env=ENV)
    finally:
        os.unlink(path)
    return json.loads(out.stdout)


def rel(a, b):
    return abs(a - b) / max(abs(b), 1e-300)


def compare_statsmodels(binary, frame, outcome, covariates, label):
    got = run(binary, frame, outcome, covariates)
    ref = sm.OLS(frame[outcome].astype(float), sm.add_constant(frame[covariates].astype(float))).fit()
    params = [got["intercept"], *got["coef"]]
    worst_b = max(rel(a, b) for a, b in zip(params, ref.params))
    worst_se = max(rel(a, b) for a, b in zip(got["std_error"], ref.bse))
    hc1 = sm.OLS(frame[outcome].astype(float), sm.add_constant(frame[covariates].astype(float))).fit(cov_type="HC1")
    worst_hc1 = max(rel(a, b) for a, b in zip(got["hc1"], hc1.bse))
    print(f"{label}: statsmodels OLS agreement: coefficients rel {worst_b:.1e}, std errors rel {worst_se:.1e}, HC1 std errors rel {worst_hc1:.1e}")
    check(worst_b < 1e-8, f"{label} coefficients vs statsmodels: {worst_b}")
    check(worst_se < 1e-6, f"{label} standard errors vs statsmodels: {worst_se}")
    check(worst_hc1 < 1e-6, f"{label} HC1 standard errors vs statsmodels: {worst_hc1}")
    return got


def main(binary):
    global MODE, ENV
    plain = {k: v for k, v in os.environ.items() if k != "UPSHOT_FIT_DB"}
    runs = [(m, plain, "in-database path (DuckDB)" if m else "finisher on in-memory sums") for m in MODES]
    if POSTGRES:
        runs.append((["--in-db"], {**plain, "UPSHOT_FIT_DB": POSTGRES},
                     "in-database path (PostgreSQL: the CSV's columns loaded into a table there)"))
    for MODE, ENV, label in runs:
        print("== " + label)
        checks(binary)
    print(f"{passed} passed, {failed} failed")
    return 1 if failed else 0


def checks(binary):
    data = longley.load_pandas().data
    cov = ["GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR"]
    got = compare_statsmodels(binary, data, "TOTEMP", cov, "Longley")
    est = {"const": got["intercept"], **dict(zip(cov, got["coef"]))}
    lres = {k: (-math.log10(rel(est[k], v)) if est[k] != v else 15.0) for k, v in CERTIFIED.items()}
    print("Longley vs NIST certified, correct significant digits (LRE): " + ", ".join(f"{k} {v:.1f}" for k, v in lres.items()))
    check(min(lres.values()) >= 9, f"Longley LRE {min(lres.values()):.2f} < 9")

    root = os.path.join(os.path.dirname(__file__), "..", "..")
    demo = pd.read_csv(os.path.join(root, "demo-data", "sample", "customers.csv"))
    compare_statsmodels(binary, demo, "spend_30d", ["prior_orders", "household_size", "app_sessions", "voucher"], "demo sample")

    collinear = demo[["prior_orders", "household_size", "spend_30d"]].copy()
    collinear["orders_plus_household"] = collinear["prior_orders"] + collinear["household_size"]
    got = run(binary, collinear, "spend_30d", ["prior_orders", "household_size", "orders_plus_household"])
    check("collinear" in got.get("error", "") and "orders_plus_household" in got["error"], f"collinear design: {got}")

    # Voucher targeting: prior orders, household size and zone dummies (Riverside..Eastfield).
    zones = pd.get_dummies(demo["zone"], prefix="zone", dtype=float).drop(columns="zone_Northgate")
    zones.columns = [c.replace(" ", "_") for c in zones.columns]
    frame = pd.concat([demo[["prior_orders", "household_size", "mail_wave", "voucher"]].astype(float), zones], axis=1)
    cov = ["prior_orders", "household_size", "mail_wave", *zones.columns]
    got = run(binary, frame, "voucher", cov, logistic=True)
    ref = sm.Logit(frame["voucher"], sm.add_constant(frame[cov])).fit(disp=0, tol=1e-12, maxiter=100)
    worst_b = max(rel(a, b) for a, b in zip(got["coef"], ref.params))
    worst_se = max(rel(a, b) for a, b in zip(got["std_error"], ref.bse))
    ll = rel(got["loglik"], ref.llf)
    print(f"logistic (demo voucher targeting, {len(cov) + 1} coefficients, {got['iterations']} Newton passes): statsmodels Logit agreement: coefficients rel {worst_b:.1e}, std errors rel {worst_se:.1e}, log-likelihood rel {ll:.1e}")
    check(worst_b < 1e-8, f"logit coefficients vs statsmodels: {worst_b}")
    check(worst_se < 1e-6, f"logit standard errors vs statsmodels: {worst_se}")
    check(ll < 1e-10, f"logit log-likelihood vs statsmodels: {ll}")
    sep = pd.DataFrame({"x": np.arange(40) / 10.0, "y": (np.arange(40) >= 20).astype(float)})
    got = run(binary, sep, "y", ["x"], logistic=True)
    check("separation" in got.get("error", "") and "`x`" in got["error"], f"separated data: {got}")


if __name__ == "__main__":
    if len(sys.argv) > 3 and sys.argv[2] == "--postgres":
        POSTGRES = sys.argv[3]
    sys.exit(main(sys.argv[1]))
