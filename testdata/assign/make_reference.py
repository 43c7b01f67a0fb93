#!/usr/bin/python3
"""Reference objectives for match/assign's Optimal and Full.

Run once with Debian's python3-scipy 1.10 and python3-networkx 2.8:
    /usr/bin/python3 testdata/assign/make_reference.py > testdata/assign/reference.json

Instances are integer scores drawn by a 64-bit LCG (Knuth's MMIX constants);
optimal_test.go implements the same generator, so only the seeds and the
reference values are committed. Layout: nt treated scores, then nc control
scores, each (x >> 33) % r.

- 1:1 without caliper: scipy.optimize.linear_sum_assignment on the dense
  |s_t - s_c| matrix (nt <= nc, so every treated is assigned).
- 1:k and full matching: networkx.network_simplex on integer weights, the
  lexicographic objectives built from big-M weights in exact Python integers
  (a formulation written independently of the Go one: source/sink with
  bonus arcs for full matching, bypass arcs for 1:k).
"""
import json

import networkx as nx
import numpy as np
from scipy.optimize import linear_sum_assignment

MASK = (1 << 64) - 1


def instance(seed, nt, nc, r):
    x = seed
    out = []
    for _ in range(nt + nc):
        x = (x * 6364136223846793005 + 1442695040888963407) & MASK
        out.append((x >> 33) % r)
    return out[:nt], out[nt:]


def lsa(seed, nt, nc, r):
    t, c = instance(seed, nt, nc, r)
    cost = np.abs(np.subtract.outer(np.array(t, dtype=float), np.array(c, dtype=float)))
    rows, cols = linear_sum_assignment(cost)
    return {"seed": seed, "nt": nt, "nc": nc, "r": r, "objective": float(cost[rows, cols].sum())}


def inside(d, cal):
    return cal == 0 or d <= cal


def one_to_k(seed, nt, nc, r, k, cal):
    t, c = instance(seed, nt, nc, r)
    g = nx.DiGraph()
    pairs = [(i, j, abs(t[i] - c[j])) for i in range(nt) for j in range(nc) if inside(abs(t[i] - c[j]), cal)]
    big1 = sum(d for _, _, d in pairs) + 1          # > any total distance
    big2 = (nt * k + 1) * big1                      # > any count of unfilled slots
    g.add_node("T", demand=nt * k)
    for i in range(nt):
        g.add_node(("t", i), demand=-k)
        g.add_edge(("t", i), ("b1", i), capacity=1, weight=big2)
        g.add_edge(("b1", i), "T", capacity=1, weight=0)
        if k > 1:
            g.add_edge(("t", i), ("b2", i), capacity=k - 1, weight=big1)
            g.add_edge(("b2", i), "T", capacity=k - 1, weight=0)
    for j in range(nc):
        g.add_edge(("c", j), "T", capacity=1, weight=0)
    for i, j, d in pairs:
        g.add_edge(("t", i), ("c", j), capacity=1, weight=d)
    _, flow = nx.network_simplex(g)
    dist = sum(d for i, j, d in pairs if flow[("t", i)][("c", j)] == 1)
    got = [sum(flow[("t", i)][("c", j)] for j in range(nc) if ("c", j) in flow[("t", i)]) for i in range(nt)]
    return {"seed": seed, "nt": nt, "nc": nc, "r": r, "k": k, "caliper": cal,
            "matched_treated": sum(1 for x in got if x > 0), "pairs": sum(got), "objective": dist}


def full(seed, nt, nc, r, max_controls, max_treated, cal):
    t, c = instance(seed, nt, nc, r)
    u = max_controls or nc
    v = max_treated or nt
    pairs = [(i, j, abs(t[i] - c[j])) for i in range(nt) for j in range(nc) if inside(abs(t[i] - c[j]), cal)]
    bonus = sum(d for _, _, d in pairs) + 1         # covering a unit outweighs any distance
    g = nx.DiGraph()
    for i in range(nt):
        g.add_edge("S", ("t", i), capacity=1, weight=-bonus)
        if u > 1:
            g.add_edge("S", ("xt", i), capacity=u - 1, weight=0)
            g.add_edge(("xt", i), ("t", i), capacity=u - 1, weight=0)
    for j in range(nc):
        g.add_edge(("c", j), "T", capacity=1, weight=-bonus)
        if v > 1:
            g.add_edge(("c", j), ("xc", j), capacity=v - 1, weight=0)
            g.add_edge(("xc", j), "T", capacity=v - 1, weight=0)
    for i, j, d in pairs:
        g.add_edge(("t", i), ("c", j), capacity=1, weight=d)
    g.add_edge("T", "S", capacity=nt * nc + 1, weight=0)
    _, flow = nx.network_simplex(g)
    covered = sum(flow["S"][("t", i)] for i in range(nt)) + sum(flow[("c", j)]["T"] for j in range(nc))
    dist = sum(d for i, j, d in pairs if flow[("t", i)][("c", j)] == 1)
    return {"seed": seed, "nt": nt, "nc": nc, "r": r, "max_controls": max_controls,
            "max_treated": max_treated, "caliper": cal, "uncovered": nt + nc - covered, "objective": dist}


def main():
    ref = {
        "source": "scipy.optimize.linear_sum_assignment (scipy 1.10), networkx.network_simplex (networkx 2.8)",
        "lsa": [lsa(*a) for a in [
            (11, 50, 80, 1000), (12, 300, 310, 10), (13, 1000, 1100, 300),
            (14, 2000, 2000, 1000000), (15, 2000, 2000, 50), (16, 1000, 1060, 7)]],
        "one_to_k": [one_to_k(*a) for a in [
            (21, 20, 60, 100, 2, 0), (22, 30, 50, 20, 2, 3), (23, 25, 40, 10, 3, 2),
            (24, 40, 30, 50, 1, 5), (25, 15, 70, 8, 4, 1), (26, 60, 90, 1000, 1, 40)]],
        "full": [full(*a) for a in [
            (31, 20, 40, 100, 0, 0, 0), (32, 30, 30, 20, 3, 2, 3), (33, 25, 60, 10, 4, 0, 2),
            (34, 40, 20, 50, 0, 3, 5), (35, 15, 45, 8, 2, 2, 1), (36, 50, 80, 1000, 0, 0, 60)]],
    }
    print(json.dumps(ref, indent=1))


if __name__ == "__main__":
    main()
