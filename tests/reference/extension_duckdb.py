"""upshot's DuckDB loadable extension in stock DuckDB (the `duckdb` package pinned in
requirements.txt) against the `upshot` binary on the same questions.

The reference here is upshot's own CLI (the SQL surface must give the CLI's answers), run in
stock DuckDB as released on PyPI:
- `upshot_study(path)` on every demo study, and `upshot_estimate(...)` on flag combinations
  (methods, estimands, segments), against `upshot run --format json`: every column equal, numbers
  to a relative 1e-12;
- `upshot_identify(...)` against `upshot check --format json --offline` (minimal and optimal
  sets, front-door sets, instruments, the chosen set and its assumptions);
- `upshot_plan(...)` against `upshot plan --format json` (each pass's name and SQL text);
- bad input: a DuckDB error carrying the CLI's message for the same input, and the database file
  unchanged (its tables, row counts and a content hash). These run in a second database of the
  same process, so they also check that each database's calls run on that database.

Usage: extension_duckdb.py PATH/TO/upshot.duckdb_extension PATH/TO/upshot REPO_ROOT
"""

import json
import os
import re
import subprocess
import sys
import tempfile

import duckdb

EXT, UPSHOT, ROOT = sys.argv[1:4]
os.chdir(ROOT)
CSV = "demo-data/sample/customers.csv"
GRAPH = "demo-data/voucher.graph"
SQL_NAME = {"graph": "diagram", "segment-by": "segments"}
failures = []
checks = 0


def fail(what):
    failures.append(what)
    print("FAIL", what)


def connect(path=":memory:"):
    con = duckdb.connect(path, config={"allow_unsigned_extensions": "true"})
    con.execute(f"LOAD '{EXT}'")
    return con


def cli(args):
    p = subprocess.run([UPSHOT] + args, capture_output=True, text=True)
    return p.returncode, p.stdout, p.stderr.strip().removeprefix("upshot: error: ")


def rows(con, sql, params=None):
    cur = con.execute(sql, params or [])
    names = [d[0] for d in cur.description]
    return [dict(zip(names, r)) for r in cur.fetchall()]


def same_number(a, b):
    if a is None or b is None:
        return a is None and b is None
    return a == b or abs(a - b) <= 1e-12 * max(abs(a), abs(b))


def compare_estimates(label, sql_rows, cli_json):
    global checks
    doc = json.loads(cli_json)
    warnings = {q["question"]: q["diagnostics"]["warnings"] for q in doc["questions"]}
    want = doc["estimates"]
    if len(sql_rows) != len(want):
        fail(f"{label}: {len(sql_rows)} rows, CLI {len(want)}")
        return
    for got, w in zip(sql_rows, want):
        for k in ["question", "segment", "estimand", "method", "adjustment_set"]:
            if got[k] != w[k]:
                fail(f"{label} {w['segment']}: {k} {got[k]!r} != CLI {w[k]!r}")
        for k in ["estimate", "std_error", "ci_low", "ci_high", "n_treated", "n_control", "n_used"]:
            if not same_number(got[k], w.get(k)):
                fail(f"{label} {w['segment']}: {k} {got[k]!r} != CLI {w.get(k)!r}")
        if got["warnings"] != warnings[w["question"]]:
            fail(f"{label}: warnings differ")
        checks += 1


con = connect()

# Every demo study through upshot_study.
for study in sorted(f for f in os.listdir("demo-data") if f.endswith(".toml")):
    path = f"demo-data/{study}"
    code, out, err = cli(["run", path, "--format", "json"])
    try:
        got = rows(con, "SELECT * FROM upshot_study(?)", [path])
        if code != 0:
            fail(f"upshot_study({study}): rows where the CLI refused: {err}")
        else:
            compare_estimates(f"upshot_study({study})", got, out)
    except duckdb.Error as e:
        if code == 0:
            fail(f"upshot_study({study}): {e}")
        elif err.split("\n")[0] not in str(e):
            fail(f"upshot_study({study}): message {e} lacks the CLI's: {err}")
        else:
            checks += 1

# Flag combinations through upshot_estimate.
COMBOS = [
    # The demo study's questions (demo-data/voucher-backdoor.toml), asked through the arguments.
    ("voucher", "spend_30d", {"estimand": "ATE", "segments": "tenure_band", "unit": "customer_id"}),
    ("voucher", "spend_30d", {"estimand": "ATT", "unit": "customer_id"}),
    ("voucher", "reordered_30d", {"estimand": "ATE", "method": "doubly-robust", "unit": "customer_id"}),
    # Every method, estimand and option.
    ("voucher", "spend_30d", {"method": "regress"}),
    ("voucher", "spend_30d", {"method": "stratify", "adjust": "prior_orders, zone"}),
    ("voucher", "spend_30d", {"method": "weight", "estimand": "ATT"}),
    ("voucher", "spend_30d", {"method": "doubly-robust", "unit": "customer_id", "segments": "tenure_band"}),
    ("voucher", "spend_30d", {"method": "partial-out", "unit": "customer_id", "folds": 3}),
    ("voucher", "reordered_30d", {"method": "doubly-robust", "estimand": "ATC", "filter": "household_size >= 2"}),
    ("voucher", "spend_30d", {"method": "regress", "squares": True, "interactions": True}),
    ("voucher", "spend_30d", {"method": "iv", "instruments": "mail_wave", "segments": "tenure_band"}),
    ("voucher", "spend_30d", {"method": "front-door", "mediators": "app_sessions", "segments": "tenure_band",
                              "min_cell": 700}),
    ("voucher", "spend_30d", {"method": "match", "estimand": "ATT", "neighbours": 3, "caliper": 0.2,
                              "segments": "tenure_band"}),
    ("voucher", "spend_30d", {"method": "regress", "segments": "prior_orders", "bins": 4, "min_cell": 30}),
    ("voucher", "spend_30d", {"method": "match", "segments": "household_size", "bins": 3}),
]
FLAG = {"segments": "--segment-by", "estimand": "--estimand", "method": "--method", "adjust": "--adjust",
        "unit": "--unit", "folds": "--folds", "filter": "--filter", "instruments": "--instruments",
        "mediators": "--mediators", "min_cell": "--min-cell", "neighbours": "--neighbours",
        "caliper": "--caliper", "bins": "--bins"}
for t, y, named in COMBOS:
    flags, params = [], []
    for k, v in named.items():
        if v is True:
            flags.append(f"--{k}")
        else:
            flags += [FLAG[k], str(v)]
        params.append(f"{k} := {v if isinstance(v, (bool, int)) else repr(v)}")
    label = f"upshot_estimate({t}, {y}, {', '.join(params)})"
    code, out, err = cli(["run", "--source", CSV, "--graph", GRAPH, "--treatment", t, "--outcome", y,
                          "--format", "json"] + flags)
    if code != 0:
        fail(f"{label}: the CLI refused: {err}")
        continue
    sql = f"SELECT * FROM upshot_estimate(?, ?, ?, ?{''.join(', ' + p for p in params)})"
    try:
        compare_estimates(label, rows(con, sql, [CSV, GRAPH, t, y]), out)
    except duckdb.Error as e:
        fail(f"{label}: {e}")

# Identification against `upshot check`.
for t, y, extra, flags in [
    ("voucher", "spend_30d", "", []),
    ("voucher", "spend_30d", ", adjust := 'zone'", ["--adjust", "zone"]),
]:
    code, out, err = cli(["check", "--graph", GRAPH, "--treatment", t, "--outcome", y, "--format", "json",
                          "--offline"] + flags)
    q = json.loads(out)["questions"][0]
    ident = q["identification"]
    got = rows(con, f"SELECT * FROM upshot_identify(?, ?, ?{extra})", [GRAPH, t, y])
    by_kind = {}
    for r in got:
        by_kind.setdefault(r["kind"], []).append(r)
    want = {
        "adjustment (minimal)": ident["adjustment"]["minimal_sets"],
        "adjustment (optimal)": [ident["adjustment"]["optimal_set"]] if ident["adjustment"]["optimal_set"] else [],
        "front-door": ident["front_door"]["sets"],
        "instrument": [[i["instrument"]] for i in ident["instrument"]["found"]],
    }
    for kind, sets in want.items():
        have = [r["variables"] for r in by_kind.get(kind, [])]
        if have != sets:
            fail(f"upshot_identify{flags}: {kind} {have} != CLI {sets}")
    chosen = [r for r in got if r["chosen"]]
    if q["chosen"] and (not chosen or chosen[0]["variables"] != q["chosen"]["set"]
                        or chosen[0]["assumptions"] != q["assumptions"]):
        fail(f"upshot_identify{flags}: chosen {chosen[:1]} != CLI {q['chosen']}")
    if flags:
        declared = by_kind.get("adjustment (declared)", [])
        d = ident["adjustment"]["declared"]
        if not declared or declared[0]["valid"] != d["valid"]:
            fail(f"upshot_identify{flags}: declared {declared} != CLI {d}")
    checks += 1

# Nothing identifies the effect: the `not identified` row carries the CLI's open path.
code, out, err = cli(["check", "--graph", "t -> y; t <-> y", "--treatment", "t", "--outcome", "y", "--format",
                      "json", "--offline"])
q = json.loads(out)["questions"][0]
got = rows(con, "SELECT * FROM upshot_identify('t -> y; t <-> y', 't', 'y')")
last = got[-1] if got else {}
if q["identified"] or last.get("kind") != "not identified" or \
        q["identification"]["adjustment"]["open_path"] not in (last.get("why_not") or ""):
    fail(f"upshot_identify(not identified): {got} against the CLI's {q['identification']['adjustment']}")
checks += 1

# Plans against `upshot plan`.
for method in ["stratify", "regress", "weight", "doubly-robust", "partial-out", "match"]:
    code, out, err = cli(["plan", "--source", CSV, "--graph", GRAPH, "--treatment", "voucher", "--outcome",
                          "spend_30d", "--method", method, "--unit", "customer_id", "--format", "json"])
    want = [(p["name"], p["sql"]) for p in json.loads(out)["questions"][0]["passes"]]
    got = [(r["name"], r["sql"]) for r in rows(
        con, "SELECT * FROM upshot_plan(?, ?, 'voucher', 'spend_30d', method := ?, unit := 'customer_id') ORDER BY pass",
        [CSV, GRAPH, method])]
    if got != want:
        fail(f"upshot_plan({method}): passes differ from the CLI's")
    checks += 1

# Bad input: the CLI's message, and the database unchanged.
tmp = tempfile.mkdtemp()
# The CLI reads a copy (the extension's connection holds the file's write lock).
ref = os.path.join(tmp, "ref.duckdb")
r = duckdb.connect(ref)
r.execute(f"CREATE TABLE customers AS SELECT * FROM read_csv_auto('{CSV}')")
r.close()
db = os.path.join(tmp, "bad.duckdb")
con = connect(db)
con.execute(f"CREATE TABLE customers AS SELECT * FROM read_csv_auto('{CSV}')")
con.execute("CREATE TEMP TABLE scratch AS SELECT * FROM customers")


def fingerprint():
    return rows(con, "SELECT table_name, estimated_size FROM duckdb_tables() ORDER BY ALL") + rows(
        con, "SELECT COUNT(*) AS n, SUM(hash(customers::VARCHAR)) AS h FROM customers")


BAD = [
    ("a malformed diagram", ["customers", "voucher -> -> spend_30d", "voucher", "spend_30d"], "", None),
    ("an unknown column", ["customers", "voucher -> spend_3d", "voucher", "spend_3d"], "", None),
    ("a non-binary treatment for a binary method", ["customers", GRAPH, "household_size", "spend_30d"],
     ", method := 'weight'", ["--method", "weight"]),
    ("a filter with a subquery", ["customers", GRAPH, "voucher", "spend_30d"],
     ", filter := 'zone IN (SELECT zone FROM customers)'", ["--filter", "zone IN (SELECT zone FROM customers)"]),
    ("a source of two statements", ["SELECT * FROM customers; DROP TABLE customers", GRAPH, "voucher", "spend_30d"],
     "", None),
    ("a TEMP-table source", ["scratch", GRAPH, "voucher", "spend_30d"], "", None),
]
for what, (src, graph, t, y), extra, flags in BAD:
    before = fingerprint()
    try:
        con.execute(f"SELECT * FROM upshot_estimate(?, ?, ?, ?{extra})", [src, graph, t, y]).fetchall()
        fail(f"{what}: no error")
        continue
    except duckdb.Error as e:
        message = str(e)
    if what == "a TEMP-table source":
        expected = "commit first, or use a regular table"
    else:
        code, out, err = cli(["run", "--db", ref, "--source", src, "--graph", graph, "--treatment", t,
                              "--outcome", y] + (flags or []))
        # The SQL surface names its arguments as SQL does (`diagram`, not `--graph`).
        expected = re.sub(r"--([a-z-]+)", lambda m: SQL_NAME.get(m.group(1), m.group(1).replace("-", "_")),
                          err.split("\n")[0])
        if code != 2:
            fail(f"{what}: the CLI gave exit {code}")
    if expected not in message:
        fail(f"{what}: message {message!r} lacks {expected!r}")
    if fingerprint() != before:
        fail(f"{what}: the database changed")
    checks += 1

# Composing with SQL: CREATE TABLE ... AS, WHERE, joins; the caller's uncommitted rows unseen.
con.execute("CREATE TABLE effects AS SELECT * FROM upshot_estimate('customers', ?, 'voucher', 'spend_30d', "
            "segments := 'tenure_band')", [GRAPH])
joined = rows(con, "SELECT e.segment, COUNT(*) AS n FROM effects e JOIN customers c "
                   "ON e.segment = 'tenure_band=' || c.tenure_band WHERE e.estimate > 0 GROUP BY ALL")
if sum(r["n"] for r in joined) != rows(con, "SELECT COUNT(*) AS n FROM customers")[0]["n"]:
    fail(f"CREATE TABLE AS / join: {joined}")
con.execute("BEGIN")
con.execute("INSERT INTO customers SELECT * FROM customers LIMIT 10")
n_used = rows(con, "SELECT n_used FROM upshot_estimate('customers', ?, 'voucher', 'spend_30d')", [GRAPH])[0]["n_used"]
con.execute("ROLLBACK")
if n_used != 5000:
    fail(f"an open transaction's rows were seen: n_used {n_used}")
checks += 2

print(f"extension in stock DuckDB {duckdb.__version__}: {checks} checks, {len(failures)} failed")
sys.exit(1 if failures else 0)
