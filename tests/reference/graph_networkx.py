"""Cross-check of upshot's d-separation and adjustment-set validity against networkx.

Reference: networkx (PyPI), `networkx.is_d_separator`, a general-purpose graph library's
d-separation. Adjustment validity is recomputed here from its definition -- the adjustment
criterion of Shpitser, VanderWeele & Robins (2010) in the form of Perkovic et al. (2018) -- using
only networkx primitives (descendants, ancestors, is_d_separator). Pearl's backdoor criterion
(Causality, 2009, def. 3.3.1) is recomputed the same way. Listed minimal adjustment sets must be
valid and lose validity when any one member is removed (minimality of d-separators is local:
Tian, Paz & Pearl 1998); when none is listed, the largest candidate set must be invalid
(van der Zander, Liskiewicz & Textor 2019, the set An(X u Y) n R \\ forb is valid iff any is).

Every implied independence upshot reports (pairwise statements, and the local Markov basis of
diagrams without latent variables) must be a d-separation according to networkx; the local
Markov basis must also be the textbook one: each node against its non-descendants other than its
parents, given its parents (Lauritzen 1996, sec. 3.2.2).

Reads JSON lines from the file given as argument (written by the graph-cases binary).
"""
import json
import sys

import networkx as nx


def causal_nodes(g, x, y):
    gx_in = g.copy()
    gx_in.remove_edges_from([(p, v) for v in x for p in list(g.predecessors(v))])
    down = set().union(*(nx.descendants(gx_in, v) for v in x)) - set(x)
    gx_out = g.copy()
    gx_out.remove_edges_from([(v, c) for v in x for c in list(g.successors(v))])
    up = set(y).union(*(nx.ancestors(gx_out, v) for v in y))
    return down & up


def adjustment_valid(g, x, y, z):
    cn = causal_nodes(g, x, y)
    forb = set(x).union(cn, *(nx.descendants(g, v) for v in cn))
    if set(z) & forb:
        return False
    pbd = g.copy()
    pbd.remove_edges_from([(a, b) for a in x for b in list(g.successors(a)) if b in cn])
    return nx.is_d_separator(pbd, set(x), set(y), set(z))


def backdoor(g, x, y, z):
    if set(z) & set().union(*(nx.descendants(g, v) for v in x)):
        return False
    gu = g.copy()
    gu.remove_edges_from([(v, c) for v in x for c in list(g.successors(v))])
    return nx.is_d_separator(gu, set(x), set(y), set(z))


def main(path):
    passed = failed = 0
    counts = {"dsep": 0, "adjust": 0, "backdoor": 0, "minimal": 0, "none-exists": 0, "implied": 0, "markov": 0}
    with open(path) as f:
        for line in f:
            case = json.loads(line)
            g = nx.DiGraph()
            g.add_nodes_from(case["nodes"])
            g.add_edges_from(case["edges"])
            observed = set(case["nodes"]) - set(case["latent"])
            for q in case["queries"]:
                x, y, z = q["x"], q["y"], q["z"]
                checks = []
                if q["kind"] in ("dsep", "implied", "markov"):
                    checks.append((q["kind"], nx.is_d_separator(g, set(x), set(y), set(z)), q["separated"]))
                    if q["kind"] == "markov":
                        (v,) = x
                        nd = set(g.nodes) - nx.descendants(g, v) - {v} - set(g.predecessors(v))
                        ok = set(z) == set(g.predecessors(v)) and set(y) == nd
                        checks.append(("markov", ok, True))
                else:
                    checks.append(("adjust", adjustment_valid(g, x, y, z), q["valid"]))
                    checks.append(("backdoor", backdoor(g, x, y, z), q["backdoor"]))
                    for s in q["minimal_sets"]:
                        ok = adjustment_valid(g, x, y, s) and all(
                            not adjustment_valid(g, x, y, [v for v in s if v != u]) for u in s
                        ) and set(s) <= observed
                        checks.append(("minimal", ok, True))
                    if not q["minimal_sets"]:
                        cn = causal_nodes(g, x, y)
                        forb = set(x).union(cn, *(nx.descendants(g, v) for v in cn))
                        an = set(x).union(y, *(nx.ancestors(g, v) for v in list(x) + list(y)))
                        z0 = (an & observed) - forb - set(y)
                        checks.append(("none-exists", adjustment_valid(g, x, y, z0), False))
                for kind, want, got in checks:
                    counts[kind] += 1
                    if want == got:
                        passed += 1
                    else:
                        failed += 1
                        print(f"MISMATCH {kind}: networkx {want}, upshot {got}: x={x} y={y} z={z} edges={case['edges']}")
    print("networkx cross-check: " + ", ".join(f"{k} {v}" for k, v in counts.items()))
    print(f"{passed} passed, {failed} failed")
    return 1 if failed or counts["dsep"] + counts["adjust"] < 2000 else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1]))
