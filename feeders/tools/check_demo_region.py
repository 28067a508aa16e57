#!/usr/bin/env python3
"""Checks the electrical character of the demo region in feeders/ (standalone, stdlib only).

Reads every feeder folder (feeder.toml, nodes.csv, branches.csv, the shared conductors.csv and
study.toml) as written by make_demo_region.py, and for each feeder and scenario prints the
lowest and highest node voltage, the highest branch loading and a rough hosting-capacity
estimate: new generation P is injected at a node and increased until a criterion is violated
(overvoltage, undervoltage, thermal, voltage change on trip), following the definition in the
feeder-format spec (a violation counts only when it is beyond the limit and worse than at P = 0).

The load flow is a positive-sequence backward/forward sweep on the radial tree, constant-power
loads, per unit on 1 MVA and the feeder's nominal voltage, head held at head_voltage_pu.
This is a design check for the demo data, not the headroom program: the search steps coarsely
(250 kW) and then bisects to 1 kW, which agrees with the spec's 50 kW stepping unless the
criteria are non-monotonic inside a coarse step.

Usage:  python3 feeders/tools/check_demo_region.py [FEEDERS_DIR] [--all] [--sample N]
        --all       estimate the capacity at every node (slower: about a minute)
        --sample N  nodes per feeder otherwise (default 24, spread along the node list)
"""

import argparse
import cmath
import csv
import math
import os
import sys
import tomllib
from collections import Counter, deque

S_BASE_MVA = 1.0


def read_csv(path):
    with open(path, newline="") as f:
        return [{k.strip(): (v or "").strip() for k, v in row.items()} for row in csv.DictReader(f)]


def num(row, key, default=0.0):
    v = row.get(key, "")
    return float(v) if v != "" else default


class Model:
    def __init__(self, folder, library):
        self.fid = os.path.basename(folder.rstrip("/"))
        with open(os.path.join(folder, "feeder.toml"), "rb") as f:
            hdr = tomllib.load(f)
        self.kv = float(hdr["nominal_kv"])
        self.head = hdr["head"]
        self.v_head = float(hdr.get("head_voltage_pu", 1.0))
        lib = dict(library)
        local = os.path.join(folder, "conductors.csv")
        if os.path.exists(local):
            for r in read_csv(local):
                lib[r["type"]] = r
        nodes = read_csv(os.path.join(folder, "nodes.csv"))
        self.ids = [n["id"] for n in nodes]
        assert len(set(self.ids)) == len(self.ids), "duplicate node id"
        idx = {nid: i for i, nid in enumerate(self.ids)}
        self.xy = [(num(n, "x"), num(n, "y")) for n in nodes]
        self.load = [complex(num(n, "load_kw"), num(n, "load_kvar")) / 1000.0 for n in nodes]
        self.gen = [complex(num(n, "gen_kw"), num(n, "gen_kvar")) / 1000.0 for n in nodes]
        z_base = self.kv ** 2 / S_BASE_MVA
        self.i_base_a = S_BASE_MVA * 1000.0 / (math.sqrt(3.0) * self.kv)
        adj = [[] for _ in nodes]
        self.branch_rows = []
        self.length_ratios = []  # length_km / straight coordinate distance, per typed branch
        for b in read_csv(os.path.join(folder, "branches.csv")):
            closed = b.get("closed", "").lower() not in ("false", "0")
            if not closed:
                continue
            if b.get("type"):
                c = lib[b["type"]]
                length = float(b["length_km"])
                r = float(c["r_ohm_per_km"]) * length
                x = float(c["x_ohm_per_km"]) * length
                rating = num(b, "rating_a", float(c["rating_a"]))
            else:
                r, x, rating = float(b["r_ohm"]), float(b["x_ohm"]), float(b["rating_a"])
            a, t = idx[b["from"]], idx[b["to"]]
            if b.get("type"):
                (xa, ya), (xt, yt) = self.xy[a], self.xy[t]
                straight = math.hypot(xt - xa, yt - ya) / 1000.0
                if straight > 0:
                    self.length_ratios.append((length / straight, b["id"]))
            k = len(self.branch_rows)
            self.branch_rows.append((b["id"], complex(r, x) / z_base, rating))
            adj[a].append((t, k))
            adj[t].append((a, k))
        # Orient the tree from the head (breadth first).
        n = len(nodes)
        self.parent = [-1] * n
        self.branch_of = [-1] * n  # closed branch feeding each node
        self.order = []
        seen = [False] * n
        h = idx[self.head]
        seen[h] = True
        q = deque([h])
        while q:
            u = q.popleft()
            for v, k in adj[u]:
                if seen[v]:
                    if v != self.parent[u]:
                        pass  # loop check below via counts
                    continue
                seen[v] = True
                self.parent[v] = u
                self.branch_of[v] = k
                self.order.append(v)
                q.append(v)
        assert all(seen), f"{self.fid}: island"
        assert len(self.branch_rows) == n - 1, f"{self.fid}: not a tree"
        self.h = h
        self.z = [0j] * n
        self.rating_pu = [math.inf] * n
        self.bid = [""] * n
        for v in self.order:
            name, z, rating = self.branch_rows[self.branch_of[v]]
            self.z[v] = z
            self.rating_pu[v] = rating / self.i_base_a
            self.bid[v] = name
        self.depth_km = [0.0] * n

    def solve(self, load_scale, gen_scale, extra=None, v_start=None):
        """Returns (V list, branch current list indexed by the fed node) or None."""
        n = len(self.ids)
        s = [self.gen[i] * gen_scale - self.load[i] * load_scale for i in range(n)]
        if extra is not None:
            k, p = extra
            s[k] += p
        v = list(v_start) if v_start else [complex(self.v_head, 0.0)] * n
        v[self.h] = complex(self.v_head, 0.0)
        order, parent, z = self.order, self.parent, self.z
        for _ in range(60):
            j = [(s[i] / v[i]).conjugate() for i in range(n)]  # current injected into the net
            for u in reversed(order):
                j[parent[u]] += j[u]
            # j[u] is now the current flowing from u towards the head; branch current = -j[u].
            worst = 0.0
            for u in order:
                nv = v[parent[u]] + z[u] * j[u]
                d = abs(nv - v[u])
                if d > worst:
                    worst = d
                v[u] = nv
            if worst < 1e-10:
                return v, [abs(x) for x in j]
        return None


def violations(m, base_v, base_i, v, i_br, limits):
    out = []
    vmax, vmin = limits["v_max_pu"], limits["v_min_pu"]
    dv = limits["voltage_change_pct"] / 100.0
    th = limits["thermal_pct"] / 100.0
    eps = 1e-9
    for u in range(len(v)):
        a, a0 = abs(v[u]), abs(base_v[u])
        if a > vmax and a > a0 + eps:
            out.append(("overvoltage", m.ids[u], a - vmax))
        if a < vmin and a < a0 - eps:
            out.append(("undervoltage", m.ids[u], vmin - a))
        if dv > 0 and abs(a - a0) > dv:
            out.append(("voltage_change", m.ids[u], abs(a - a0) - dv))
    for u in m.order:
        if i_br[u] > m.rating_pu[u] * th and i_br[u] > base_i[u] + eps:
            out.append(("thermal", m.bid[u], i_br[u] / (m.rating_pu[u] * th) - 1.0))
    return out


PRIORITY = ["overvoltage", "undervoltage", "thermal", "voltage_change", "reverse_flow"]


def hosting(m, k, sc, base, limits, search):
    base_v, base_i = base
    max_kw = search["max_kw"]
    coarse = 250.0

    def test(p_kw):
        r = m.solve(sc["load_scale"], sc["gen_scale"], (k, p_kw / 1000.0), base_v)
        if r is None:
            return [("not_converged", "", 0.0)]
        return violations(m, base_v, base_i, r[0], r[1], limits)

    ok, p = 0.0, coarse
    while True:
        p = min(p, max_kw)
        if test(p):
            break
        ok = p
        if p >= max_kw:
            return max_kw, "search_max", ""
        p += coarse
    lo, hi = ok, p
    while hi - lo > 1.0:
        mid = math.floor((lo + hi) / 2.0)
        if mid <= lo:
            break
        if test(mid):
            hi = mid
        else:
            lo = mid
    viol = test(hi)
    viol.sort(key=lambda t: (PRIORITY.index(t[0]) if t[0] in PRIORITY else 9, -t[2]))
    return lo, viol[0][0], viol[0][1]


def main():
    here = os.path.dirname(os.path.abspath(__file__))
    ap = argparse.ArgumentParser()
    ap.add_argument("feeders", nargs="?", default=os.path.dirname(here))
    ap.add_argument("--all", action="store_true")
    ap.add_argument("--sample", type=int, default=24)
    ap.add_argument("--only", default=None, help="substring of the feeder ids to check")
    args = ap.parse_args()
    root = args.feeders
    library = {}
    if os.path.exists(os.path.join(root, "conductors.csv")):
        library = {r["type"]: r for r in read_csv(os.path.join(root, "conductors.csv"))}
    study = {}
    if os.path.exists(os.path.join(root, "study.toml")):
        with open(os.path.join(root, "study.toml"), "rb") as f:
            study = tomllib.load(f)
    limits = {"v_max_pu": 1.05, "v_min_pu": 0.95, "thermal_pct": 100.0,
              "voltage_change_pct": 3.0}
    limits.update(study.get("limits", {}))
    search = {"max_kw": 20000.0}
    search.update(study.get("search", {}))
    scenarios = study.get("scenario") or [
        {"name": "min-load", "load_scale": 0.3, "gen_scale": 1.0},
        {"name": "peak-load", "load_scale": 1.0, "gen_scale": 0.0}]
    folders = sorted(d for d in os.listdir(root)
                     if os.path.exists(os.path.join(root, d, "feeder.toml")))
    if args.only:
        folders = [d for d in folders if args.only in d]
    for d in folders:
        m = Model(os.path.join(root, d), library)
        total_load = sum(m.load).real * 1000
        total_gen = sum(m.gen).real * 1000
        lengths = sum(abs(z) for z in m.z)
        print(f"\n== {m.fid}: {m.kv:g} kV, {len(m.ids)} nodes, head {m.head} at "
              f"{m.v_head:g} pu, peak load {total_load:.0f} kW, existing gen {total_gen:.0f} kW")
        lo_r, hi_r = min(m.length_ratios), max(m.length_ratios)
        bad = [bid for r, bid in m.length_ratios if not 0.8 <= r <= 1.2]
        print(f"  length_km / coordinate distance: {lo_r[0]:.3f}-{hi_r[0]:.3f}"
              + (f"  OUTSIDE +-20 %: {', '.join(bad)}" if bad else " (within +-20 %)"))
        for sc in scenarios:
            r = m.solve(sc["load_scale"], sc["gen_scale"])
            if r is None:
                print(f"  {sc['name']}: load flow did not converge")
                continue
            v, ib = r
            vm = [abs(x) for x in v]
            lo = min(range(len(vm)), key=vm.__getitem__)
            hi = max(range(len(vm)), key=vm.__getitem__)
            loads = [(ib[u] / m.rating_pu[u] * 100.0, u) for u in m.order]
            over = [(pct, m.bid[u]) for pct, u in loads if pct > 100.0]
            worst_pct, worst_u = max(loads)
            head_i_a = ib[m.order[0]] * m.i_base_a if m.order else 0.0
            print(f"  {sc['name']:<9} Vmin {vm[lo]:.4f} at {m.ids[lo]:<14} "
                  f"Vmax {vm[hi]:.4f} at {m.ids[hi]:<14} "
                  f"max loading {worst_pct:5.1f} % on {m.bid[worst_u]}"
                  + (f"  [{len(over)} branch(es) > 100 %]" if over else "")
                  + (f"  [{sum(x < 0.95 for x in vm)} node(s) < 0.95]"
                     if vm[lo] < 0.95 else ""))
            cand = [u for u in range(len(m.ids)) if u != m.h]
            if not args.all and len(cand) > args.sample:
                step = len(cand) / args.sample
                cand = [cand[int(i * step)] for i in range(args.sample)]
            tally = Counter()
            rows = []
            for u in cand:
                hc, lim, el = hosting(m, u, sc, (v, ib), limits, search)
                tally[lim] += 1
                rows.append((m.ids[u], hc, lim, el))
            n = len(rows)
            share = ", ".join(f"{k} {c}/{n}" for k, c in tally.most_common())
            hcs = sorted(r[1] for r in rows)
            print(f"            HC estimate over {n} nodes: median {hcs[n // 2]:.0f} kW, "
                  f"range {hcs[0]:.0f}-{hcs[-1]:.0f} kW; binding: {share}")
            for nid, hc, lim, el in rows[:: max(1, n // 5)][:5]:
                print(f"              {nid:<16} {hc:8.0f} kW  {lim} at {el}")


if __name__ == "__main__":
    sys.exit(main())
