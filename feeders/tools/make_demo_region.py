#!/usr/bin/env python3
"""Regenerates the demo region in feeders/ (data only).

Tessary Vale is a fictional distribution region made up for headroom's demos and tests: two
substations (Corrowmoor, Hallowick) and five radial feeders of different character. Every name
and every load is invented; the coordinates are in WGS 84 / UTM zone 30N (EPSG:32630) and land
on open country in that zone so the maps look sensible, but no real network is represented.

Running this script rewrites, under the feeders/ folder that holds tools/:

    conductors.csv                 shared library of line and cable types (see feeders/README.md)
    study.toml                     default limits and scenarios, commented
    <feeder-id>/feeder.toml        header (nominal voltage, head, source voltage, grouping, CRS)
    <feeder-id>/nodes.csv          one row per node
    <feeder-id>/branches.csv       one row per branch

It uses only the Python 3 standard library and a fixed seed per feeder, so the output is the same
on every run and every machine. Check the electrical character of the result with
check_demo_region.py (a small load flow and hosting-capacity estimate) beside this file.

Usage:  python3 feeders/tools/make_demo_region.py [--out FEEDERS_DIR]
"""

import argparse
import math
import os
import random

REGION = "Tessary Vale"
CRS = "EPSG:32630"  # WGS 84 / UTM zone 30N, metres
SEED = 7321  # base seed; each feeder adds its own offset

# Substation busbars (easting, northing in EPSG:32630).
CORROWMOOR_XY = (497_800.0, 5_818_400.0)
HALLOWICK_XY = (512_600.0, 5_806_300.0)

# ---------------------------------------------------------------------------------------------
# Conductor library. Values from the project's reference notes (trade-facts.md section 3):
# overhead ACSR/AAAC: R at 75 C and X1 at the typical phase spacing of the voltage level (3.3);
# single-core Al XLPE cables in trefoil: R at 90 C and X1 for the voltage class (3.2), ratings at
# the low end of the indicative buried range. All "typical values, common practice".
# (type, r_ohm_per_km, x_ohm_per_km, rating_a)
CONDUCTORS = [
    # 11 kV overhead, GMD 1.0 m
    ("OH-ACSR-RABBIT-11", 0.663, 0.349, 200.0),
    ("OH-ACSR-DOG-11", 0.334, 0.328, 300.0),
    ("OH-ACSR-WOLF-11", 0.223, 0.312, 400.0),
    # 22 kV overhead, GMD 1.25 m (not used by the demo feeders; kept for users' own models)
    ("OH-AAAC-50-22", 0.80, 0.372, 180.0),
    ("OH-AAAC-100-22", 0.40, 0.350, 300.0),
    ("OH-AAAC-150-22", 0.27, 0.337, 400.0),
    # 33 kV overhead, GMD 1.6 m
    ("OH-ACSR-RABBIT-33", 0.663, 0.379, 200.0),
    ("OH-ACSR-DOG-33", 0.334, 0.357, 300.0),
    ("OH-ACSR-WOLF-33", 0.223, 0.341, 400.0),
    ("OH-ACSR-DOVE-33", 0.126, 0.325, 730.0),
    # 11 kV (6/10 kV class) single-core Al XLPE, trefoil, buried
    ("UG-XLPE-AL-95-11", 0.411, 0.114, 215.0),
    ("UG-XLPE-AL-120-11", 0.325, 0.109, 245.0),
    ("UG-XLPE-AL-150-11", 0.265, 0.106, 270.0),
    ("UG-XLPE-AL-185-11", 0.211, 0.102, 305.0),
    ("UG-XLPE-AL-240-11", 0.161, 0.098, 350.0),
    ("UG-XLPE-AL-300-11", 0.129, 0.095, 395.0),
    ("UG-XLPE-AL-400-11", 0.101, 0.092, 450.0),
    # 33 kV (18/30 kV class) single-core Al XLPE, trefoil, buried
    ("UG-XLPE-AL-95-33", 0.411, 0.132, 215.0),
    ("UG-XLPE-AL-185-33", 0.211, 0.118, 305.0),
    ("UG-XLPE-AL-300-33", 0.129, 0.109, 395.0),
]


# ---------------------------------------------------------------------------------------------
# Building blocks


class FeederBuilder:
    """Collects the nodes and branches of one feeder while it is laid out."""

    def __init__(self, fid, name, nominal_kv, prefix, head_xy, head_id, head_voltage_pu,
                 substation, seed, notes):
        self.fid = fid
        self.name = name
        self.nominal_kv = nominal_kv
        self.prefix = prefix
        self.head_voltage_pu = head_voltage_pu
        self.substation = substation
        self.notes = notes
        self.rng = random.Random(seed)
        self.nodes = []  # dicts: id, x, y, load_kw, load_kvar, gen_kw, gen_kvar
        self.xy = {}
        self.branches = []  # dicts: id, from, to, type, length_km, r_ohm, x_ohm, rating_a, closed
        self.n_node = 0
        self.n_branch = 0
        self.head = self.node(*head_xy, nid=head_id)

    # nodes and branches

    def node(self, x, y, load_kw=0.0, load_kvar=0.0, gen_kw=0.0, gen_kvar=0.0, nid=None):
        if nid is None:
            self.n_node += 1
            nid = f"{self.prefix}-{self.n_node:03d}"
        assert nid not in self.xy, nid
        self.nodes.append(dict(id=nid, x=x, y=y, load_kw=load_kw, load_kvar=load_kvar,
                               gen_kw=gen_kw, gen_kvar=gen_kvar))
        self.xy[nid] = (x, y)
        return nid

    def set_load(self, nid, kw, pf):
        for n in self.nodes:
            if n["id"] == nid:
                n["load_kw"] = kw
                n["load_kvar"] = kw * math.tan(math.acos(pf))
                return
        raise KeyError(nid)

    def add_gen(self, nid, kw):
        for n in self.nodes:
            if n["id"] == nid:
                n["gen_kw"] += kw
                return
        raise KeyError(nid)

    def distance_km(self, a, b):
        (xa, ya), (xb, yb) = self.xy[a], self.xy[b]
        return math.hypot(xb - xa, yb - ya) / 1000.0

    def branch(self, a, b, ctype=None, route_factor=None, rating_a=None, closed=True,
               r_ohm=None, x_ohm=None, bid=None):
        """A branch from a to b. With ctype the length is the straight distance times a routing
        factor (lines and cables do not run perfectly straight; kept within 1.00-1.15)."""
        if bid is None:
            self.n_branch += 1
            bid = f"{self.prefix}-B{self.n_branch:03d}"
        length_km = None
        if ctype is not None:
            if route_factor is None:
                route_factor = self.rng.uniform(1.02, 1.08)
            length_km = max(0.01, self.distance_km(a, b) * route_factor)
        self.branches.append({"id": bid, "from": a, "to": b, "type": ctype,
                              "length_km": length_km, "r_ohm": r_ohm, "x_ohm": x_ohm,
                              "rating_a": rating_a, "closed": closed})
        return bid

    def run(self, start, heading_deg, n_spans, span_m, ctype, load=None, jitter_deg=5.0,
            span_sd=0.15, route=(1.02, 1.08), turn_every=None, grid=False):
        """Lays n_spans consecutive spans from node `start`, heading (degrees counter-clockwise
        from east) wandering by `jitter_deg` per span. `load(rng, i)` gives (kw, pf) or None for
        each new node. With grid=True headings snap to street-like right angles. Returns the
        new node ids in order."""
        rng = self.rng
        x, y = self.xy[start]
        heading = heading_deg
        prev = start
        out = []
        for i in range(n_spans):
            if grid:
                if turn_every and i > 0 and i % turn_every == 0:
                    heading += rng.choice((-90.0, 90.0)) * rng.choice((0, 0, 1))
                h = heading + rng.gauss(0.0, jitter_deg)
            else:
                heading += rng.gauss(0.0, jitter_deg)
                h = heading
            step = span_m * max(0.4, rng.gauss(1.0, span_sd))
            x += step * math.cos(math.radians(h))
            y += step * math.sin(math.radians(h))
            kw, pf = (0.0, 1.0)
            if load is not None:
                got = load(rng, i)
                if got:
                    kw, pf = got
            nid = self.node(round(x, 1), round(y, 1), kw, kw * math.tan(math.acos(pf)))
            self.branch(prev, nid, ctype, route_factor=rng.uniform(*route))
            out.append(nid)
            prev = nid
        return out


# ---------------------------------------------------------------------------------------------
# Load shapes (peak, diversified, three-phase kW and power factor)


def rural_pole(rng, _i):
    """Pole-mounted transformers on a rural line: roughly every other pole position."""
    if rng.random() < 0.52:
        kw = rng.choice((6, 10, 16, 25, 25, 40, 60)) * rng.uniform(0.7, 1.1)
        return kw, rng.uniform(0.93, 0.97)
    return None


def rural_11(rng, _i):
    if rng.random() < 0.6:
        kw = rng.choice((10, 15, 25, 40, 60)) * rng.uniform(0.7, 1.1)
        return kw, rng.uniform(0.93, 0.96)
    return None


def urban_sub(rng, _i):
    """Ground-mounted 315-800 kVA distribution substations in a town centre; the other nodes
    are ring-main units and cable joints without load."""
    if rng.random() < 0.75:
        kw = rng.choice((60, 80, 110, 140, 170)) * rng.uniform(0.85, 1.1)
        return kw, rng.uniform(0.95, 0.97)
    return None


def suburban_sub(rng, _i):
    if rng.random() < 0.85:
        kw = rng.choice((20, 30, 45, 60, 80)) * rng.uniform(0.8, 1.1)
        return kw, rng.uniform(0.95, 0.98)
    return None


def village_sub(rng, _i):
    if rng.random() < 0.75:
        kw = rng.choice((40, 60, 90, 120, 150)) * rng.uniform(0.8, 1.1)
        return kw, rng.uniform(0.94, 0.97)
    return None


# ---------------------------------------------------------------------------------------------
# The five feeders


def uplands():
    """33 kV rural overhead line running ~30 km west into the hills: Wolf trunk then Dog, with
    Rabbit and Dog laterals. Long and lightly loaded: voltage rise binds new generation."""
    f = FeederBuilder(
        "corrowmoor-uplands-33", "Corrowmoor F1 Uplands", 33.0, "UPL", CORROWMOOR_XY,
        "CRW-33-BB", 1.03, "Corrowmoor", SEED + 1,
        ["Long rural overhead feeder (ACSR Wolf trunk, Dog and Rabbit laterals).",
         "head_voltage_pu = 1.03: the Corrowmoor tap-changer holds the 33 kV busbar 3 % high",
         "so the far end stays above 0.95 pu at peak (substation voltage regulation)."])
    rng = f.rng
    trunk_a = f.run(f.head, 168.0, 42, 290.0, "OH-ACSR-WOLF-33", rural_pole, jitter_deg=4.0)
    trunk_b = f.run(trunk_a[-1], 172.0, 64, 290.0, "OH-ACSR-DOG-33", rural_pole,
                    jitter_deg=5.0)
    trunk = trunk_a + trunk_b
    side = 1
    i = 8
    while i < len(trunk) - 3:
        start = trunk[i]
        base_heading = 170.0 + side * rng.uniform(65.0, 100.0)
        n = rng.randint(7, 24)
        ctype = "OH-ACSR-DOG-33" if n > 18 else "OH-ACSR-RABBIT-33"
        lat = f.run(start, base_heading, n, 270.0, ctype, rural_pole, jitter_deg=7.0)
        # sub-laterals (spurs to farms and hamlets)
        for j in range(2, len(lat) - 2, 5):
            if rng.random() < 0.55:
                spur_heading = base_heading + rng.choice((-1, 1)) * rng.uniform(50.0, 80.0)
                f.run(lat[j], spur_heading, rng.randint(2, 6), 240.0, "OH-ACSR-RABBIT-33",
                      rural_pole, jitter_deg=9.0)
        side = -side
        i += rng.randint(4, 7)
    # A few bigger customers: two villages and a creamery on the trunk, a hill farm wind turbine,
    # a solar park on a lateral and farm roof PV.
    f.set_load(trunk[20], 320.0, 0.95)   # village of Emberly
    f.set_load(trunk[61], 260.0, 0.95)   # village of Stallock
    f.set_load(trunk[35], 450.0, 0.90)   # creamery
    f.add_gen(trunk[88], 500.0)          # hill farm wind turbine
    lateral_nodes = [n["id"] for n in f.nodes if n["id"] not in trunk and n["id"] != f.head]
    f.add_gen(lateral_nodes[140], 1500.0)  # Quarrel Hill solar park
    for n in f.nodes[1:]:
        if rng.random() < 0.05:
            n["gen_kw"] += round(rng.uniform(10.0, 50.0), 0)  # farm roof PV
    return f


def quarry_road():
    """11 kV rural overhead feeder serving a quarry and a village, with an undersized cable
    crossing near the substation: overloaded at peak and undervoltage at its tail."""
    f = FeederBuilder(
        "corrowmoor-quarry-road-11", "Corrowmoor F2 Quarry Road", 11.0, "QRD",
        (CORROWMOOR_XY[0] + 60.0, CORROWMOOR_XY[1] - 40.0), "CRW-11-BB", 1.02, "Corrowmoor",
        SEED + 2,
        ["Rural 11 kV feeder with a BASELINE problem at peak load: the 95 mm2 cable section",
         "under the railway (QRD-B-RAIL, rating_a overridden to 160 A: derated for its duct) is",
         "loaded above 100 %, and the line from about Hobb's Cross (QRD-028) to the end sits",
         "below 0.95 pu. Both exist at P = 0, so they are not charged to applicants; new",
         "generation beyond the crossing even relieves them.",
         "head_voltage_pu = 1.02: 11 kV busbar setting at Corrowmoor."])
    rng = f.rng
    # Short Wolf exit, the cable crossing, then the Dog trunk south-east to the quarry.
    exit_ = f.run(f.head, -60.0, 3, 200.0, "OH-ACSR-WOLF-11", None, jitter_deg=3.0)
    x, y = f.xy[exit_[-1]]
    rail_a = f.node(round(x + 60.0, 1), round(y - 110.0, 1), nid="QRD-RAIL-N")
    f.branch(exit_[-1], rail_a, "OH-ACSR-WOLF-11")
    rail_b = f.node(round(x + 200.0, 1), round(y - 420.0, 1), nid="QRD-RAIL-S")
    f.branch(rail_a, rail_b, "UG-XLPE-AL-95-11", route_factor=1.10, rating_a=160.0,
             bid="QRD-B-RAIL")
    trunk = f.run(rail_b, -55.0, 30, 260.0, "OH-ACSR-DOG-11", rural_11, jitter_deg=5.0)
    tail = f.run(trunk[-1], -30.0, 16, 250.0, "OH-ACSR-RABBIT-11", rural_11, jitter_deg=6.0)
    side = 1
    for i in range(4, len(trunk) - 2, 6):
        f.run(trunk[i], -55.0 + side * rng.uniform(70.0, 95.0), rng.randint(5, 12), 230.0,
              "OH-ACSR-RABBIT-11", rural_11, jitter_deg=8.0)
        side = -side
    f.run(tail[6], 40.0, 8, 220.0, "OH-ACSR-RABBIT-11", rural_11, jitter_deg=8.0)
    # Bigger customers
    f.set_load(trunk[15], 950.0, 0.90)  # Gallow Quarry crusher and screens
    f.set_load(trunk[24], 340.0, 0.93)   # Hobb's Cross village
    f.set_load(tail[-1], 200.0, 0.92)    # Tarnside fish farm pumps
    f.set_load(tail[10], 140.0, 0.93)    # grain store
    f.add_gen(trunk[27], 200.0)          # farm anaerobic digester
    f.add_gen(trunk[8], 50.0)            # roof PV, vehicle depot
    return f


def town_centre():
    """11 kV urban cable feeder through Hallowick town centre, west of the primary: short XLPE
    runs along a street grid, heavy load, modest ratings on the distributors and spurs. Thermal
    ratings bind new generation."""
    f = FeederBuilder(
        "hallowick-town-centre-11", "Hallowick F1 Town Centre", 11.0, "HTC", HALLOWICK_XY,
        "HLW-11-BB", 1.01, "Hallowick", SEED + 3,
        ["Dense urban cable feeder: 400 mm2 Al XLPE trunk along Station Road, 240 mm2 along",
         "Kingsgate (north-south), 150/185 mm2 distributors along the cross streets and",
         "95/120 mm2 spurs; ground-mounted distribution substations every 150-250 m.",
         "head_voltage_pu = 1.01: Hallowick 11 kV busbar setting."])
    rng = f.rng
    route = (1.05, 1.15)  # cables follow the streets

    def street(start, heading, n, span_m, ctype, load=urban_sub):
        return f.run(start, heading, n, span_m, ctype, load, jitter_deg=2.0, span_sd=0.08,
                     route=route, grid=True)

    trunk = street(f.head, 172.0, 5, 220.0, "UG-XLPE-AL-400-11")
    hub = trunk[-1]
    north = street(hub, 90.0, 8, 200.0, "UG-XLPE-AL-240-11")
    south = street(hub, 270.0, 2, 200.0, "UG-XLPE-AL-240-11")
    # Cross streets west of Kingsgate, 400 m apart; spurs point away from Station Road so that
    # they never reach the next cross street.
    rows = [(north[k], 90.0) for k in (1, 3, 5, 7)] + [(south[1], 270.0), (hub, 0.0)]
    for start, away in rows:
        ctype = rng.choice(("UG-XLPE-AL-150-11", "UG-XLPE-AL-185-11"))
        row = street(start, 180.0, rng.randint(4, 6), 200.0, ctype)
        for j in range(0, len(row) - 1, 2):
            spur_heading = away if away != 0.0 else rng.choice((90.0, 270.0))
            spur_type = rng.choice(("UG-XLPE-AL-95-11", "UG-XLPE-AL-120-11"))
            street(row[j], spur_heading, rng.randint(1, 2), 150.0, spur_type)
    # Distributors north from Station Road between the primary and Kingsgate.
    for k in (1, 3):
        dist = street(trunk[k], 90.0, rng.randint(4, 6), 200.0, "UG-XLPE-AL-185-11")
        street(dist[1], 180.0 if k == 3 else 0.0, 2, 150.0, "UG-XLPE-AL-95-11")
    # A hospital and a shopping centre on their own substations.
    f.set_load(trunk[2], 600.0, 0.93)
    f.set_load(hub, 450.0, 0.95)
    for n in f.nodes[1:]:
        if rng.random() < 0.10:
            n["gen_kw"] += round(rng.uniform(20.0, 80.0), 0)  # commercial roof PV
    return f


def eastfields():
    """11 kV semi-urban feeder with much solar: housing estates with rooftop PV, a business
    park roof array and a ground-mounted solar park at the end. Voltage near 1.05 at min load."""
    f = FeederBuilder(
        "hallowick-eastfields-11", "Hallowick F2 Eastfields", 11.0, "EFD",
        HALLOWICK_XY, "HLW-11-BB", 1.02, "Hallowick",
        SEED + 4,
        ["Semi-urban feeder with much existing solar (gen_kw). In the min-load scenario",
         "(loads x0.3, existing generation x1.0) voltages sit close to the 1.05 pu limit, so",
         "little is left for new generation there.",
         "head_voltage_pu = 1.02: Hallowick 11 kV busbar setting."])
    rng = f.rng
    cable = f.run(f.head, 20.0, 6, 220.0, "UG-XLPE-AL-240-11", suburban_sub, jitter_deg=4.0,
                  route=(1.05, 1.15))
    trunk = f.run(cable[-1], 10.0, 26, 260.0, "OH-ACSR-DOG-11", suburban_sub, jitter_deg=5.0)
    side = 1
    for i in range(2, len(trunk) - 2, 4):
        lat = f.run(trunk[i], 10.0 + side * rng.uniform(70.0, 100.0), rng.randint(5, 10), 200.0,
                    rng.choice(("OH-ACSR-RABBIT-11", "UG-XLPE-AL-95-11", "UG-XLPE-AL-120-11")),
                    suburban_sub, jitter_deg=8.0, route=(1.04, 1.12))
        if rng.random() < 0.6 and len(lat) > 4:
            f.run(lat[2], 10.0 - side * 10.0, rng.randint(3, 5), 180.0, "UG-XLPE-AL-95-11",
                  suburban_sub, jitter_deg=8.0, route=(1.04, 1.12))
        side = -side
    # Rooftop PV aggregated at the distribution substations of the estates.
    for n in f.nodes[1:]:
        if n["load_kw"] > 0 and rng.random() < 0.7:
            n["gen_kw"] += round(n["load_kw"] * rng.uniform(0.5, 1.1), 0)
    f.add_gen(trunk[-1], 650.0)    # Eastfields solar park (end of the Dog trunk)
    f.add_gen(trunk[9], 450.0)     # business park roof array
    return f


def millbrook():
    """11 kV feeder laid out as an open ring south of Hallowick: two legs leave the primary and
    meet at Millbrook Green, where a normally-open switch separates them."""
    f = FeederBuilder(
        "hallowick-millbrook-11", "Hallowick F3 Millbrook", 11.0, "MLB", HALLOWICK_XY,
        "HLW-11-BB", 1.02, "Hallowick", SEED + 5,
        ["Village and suburban feeder laid out as an open ring: leg A (240 mm2 cable, then Dog)",
         "runs down the west side and leg B (300 mm2 cable, then Wolf) down the east side; they",
         "meet at Millbrook Green, where the normally-open switch MLB-NOP1 (closed = false)",
         "separates them. Either leg can back-feed the other by closing MLB-NOP1 and opening",
         "another switch; headroom studies the normal (open) configuration.",
         "Choice for the open point: both ends of MLB-NOP1 (MLB-A-END, MLB-B-END) are nodes of",
         "THIS feeder, so validation never meets a node that is unknown here. Ties whose far end",
         "belongs to another feeder folder are not written as branches in the demo data.",
         "head_voltage_pu = 1.02: Hallowick 11 kV busbar setting."])
    rng = f.rng
    hx, hy = HALLOWICK_XY
    # The ring follows an ellipse just below the primary: centre 1.9 km south, half-axes
    # 1.3 km (east-west) and 1.9 km (north-south); poles wander +-40 m off it.
    cx, cy, ax, ay = hx + 250.0, hy - 1900.0, 1300.0, 1900.0

    def leg(phis, cable, cable_spans, line, end_id):
        prev = f.head
        ids = []
        for i, phi in enumerate(phis):
            x = cx + ax * math.cos(math.radians(phi)) + rng.gauss(0.0, 40.0)
            y = cy + ay * math.sin(math.radians(phi)) + rng.gauss(0.0, 40.0)
            got = village_sub(rng, i) if i < len(phis) - 1 else (60.0, 0.96)
            kw, pf = got if got else (0.0, 1.0)
            nid = f.node(round(x, 1), round(y, 1), kw, kw * math.tan(math.acos(pf)),
                         nid=end_id if i == len(phis) - 1 else None)
            f.branch(prev, nid, cable if i < cable_spans else line,
                     route_factor=rng.uniform(1.03, 1.10))
            ids.append(nid)
            prev = nid
        return ids

    n_spans = 19
    # Leg A starts a little round the ellipse so that its first span is not a stub.
    leg_a = leg([102.0 + 165.0 * i / (n_spans - 1) for i in range(n_spans)],
                "UG-XLPE-AL-240-11", 4, "OH-ACSR-DOG-11", "MLB-A-END")
    leg_b = leg([90.0 - 175.0 * (i + 1) / n_spans for i in range(n_spans)],
                "UG-XLPE-AL-300-11", 4, "OH-ACSR-WOLF-11", "MLB-B-END")
    f.branch("MLB-A-END", "MLB-B-END", "OH-ACSR-DOG-11", closed=False, bid="MLB-NOP1")
    # Laterals pointing out of the ring (west off leg A, east off leg B), lower part only.
    for ring_leg in (leg_a, leg_b):
        for i in range(7, len(ring_leg) - 2, 3):
            x, y = f.xy[ring_leg[i]]
            heading = math.degrees(math.atan2((y - cy) / ay ** 2, (x - cx) / ax ** 2))
            f.run(ring_leg[i], heading + rng.uniform(-20.0, 20.0), rng.randint(3, 7), 200.0,
                  rng.choice(("OH-ACSR-RABBIT-11", "UG-XLPE-AL-95-11")), village_sub,
                  jitter_deg=8.0, route=(1.04, 1.12))
    # A short busbar link to the school's ring-main unit, given by its impedance, not a type.
    x1, y1 = f.xy[leg_a[1]]
    rmu = f.node(round(x1 + 25.0, 1), round(y1 + 15.0, 1), 420.0, 140.0, nid="MLB-RMU-SCHOOL")
    f.branch(leg_a[1], rmu, r_ohm=0.004, x_ohm=0.002, rating_a=630.0, bid="MLB-B-RMU")
    f.add_gen(leg_b[10], 300.0)   # Millbrook water works PV
    f.add_gen(leg_a[12], 120.0)   # church hall roof PV
    return f


FEEDERS = [uplands, quarry_road, town_centre, eastfields, millbrook]


# ---------------------------------------------------------------------------------------------
# Writing


def fmt(v, nd=1):
    """Number for CSV: empty when None, fixed decimals otherwise (no scientific notation)."""
    if v is None:
        return ""
    s = f"{v:.{nd}f}"
    if "." in s:
        s = s.rstrip("0").rstrip(".")
    return "0" if s in ("-0", "") else s


def write_feeder(root, f):
    folder = os.path.join(root, f.fid)
    os.makedirs(folder, exist_ok=True)
    total_kw = sum(n["load_kw"] for n in f.nodes)
    total_gen = sum(n["gen_kw"] for n in f.nodes)
    lines = [f"# {line}" for line in f.notes]
    lines += [
        f"# {len(f.nodes)} nodes, {sum(b['closed'] for b in f.branches)} closed branches;"
        f" peak load {total_kw / 1000:.2f} MW, existing generation {total_gen / 1000:.2f} MW.",
        "# Generated by feeders/tools/make_demo_region.py; fictional data.",
        f'name = "{f.name}"',
        f"nominal_kv = {f.nominal_kv}",
        f'head = "{f.head}"',
        f"head_voltage_pu = {f.head_voltage_pu}",
        f'substation = "{f.substation}"',
        f'region = "{REGION}"',
        f'crs = "{CRS}"  # WGS 84 / UTM zone 30N; x = easting, y = northing, metres',
        "",
    ]
    with open(os.path.join(folder, "feeder.toml"), "w", newline="\n") as out:
        out.write("\n".join(lines))
    with open(os.path.join(folder, "nodes.csv"), "w", newline="\n") as out:
        out.write("id,x,y,load_kw,load_kvar,gen_kw,gen_kvar\n")
        for n in f.nodes:
            gen = fmt(n["gen_kw"]) if n["gen_kw"] else ""
            out.write(f"{n['id']},{n['x']:.1f},{n['y']:.1f},{fmt(n['load_kw'])},"
                      f"{fmt(n['load_kvar'])},{gen},\n")
    with open(os.path.join(folder, "branches.csv"), "w", newline="\n") as out:
        out.write("id,from,to,type,length_km,r_ohm,x_ohm,rating_a,closed\n")
        for b in f.branches:
            out.write(",".join([
                b["id"], b["from"], b["to"], b["type"] or "", fmt(b["length_km"], 3),
                fmt(b["r_ohm"], 4), fmt(b["x_ohm"], 4), fmt(b["rating_a"], 1),
                "true" if b["closed"] else "false",
            ]) + "\n")


def write_conductors(root):
    with open(os.path.join(root, "conductors.csv"), "w", newline="\n") as out:
        out.write("type,r_ohm_per_km,x_ohm_per_km,rating_a\n")
        for t, r, x, a in CONDUCTORS:
            out.write(f"{t},{fmt(r, 4)},{fmt(x, 4)},{fmt(a, 1)}\n")


STUDY_TOML = """\
# Study settings for the Tessary Vale demo region. These are the defaults of the feeder format
# (docs: feeder-format spec, "Study settings"), written out so that each key says what it means
# and where its value comes from. Sources: the project's reference notes on limits
# (trade-facts.md section 1); "common practice" marks conventions with no single authority.
# Generated by feeders/tools/make_demo_region.py.

[limits]
# Highest voltage allowed at any node, head included, in per unit of nominal. 1.05 = top of
# ANSI C84.1 Range A (126 V on a 120 V base), the usual overvoltage limit of North American
# hosting-capacity studies for primary nodes (common practice). An EN 50160 profile would use 1.10.
v_max_pu = 1.05
# Lowest voltage allowed at any node. 0.95 = bottom of ANSI C84.1 Range A for service voltage
# (114 V on a 120 V base); also the usual undervoltage limit of hosting-capacity studies.
v_min_pu = 0.95
# Branch current limit in % of the continuous rating rating_a. 100 = the full rating with no
# planning margin (some utilities plan to 80-90 %; common practice).
thermal_pct = 100.0
# Largest change of any node voltage, in % of nominal, when the new generation trips (the network
# returns to the no-new-generation state). 3 % = the step-change limit of UK ENA ER P28 and the
# usual "voltage fluctuation" screen of US utilities for primary (MV) nodes (common practice).
# 0 switches the criterion off.
voltage_change_pct = 3.0
# "allow": power may flow back out of the feeder through the substation. "forbid" adds a
# reverse-flow criterion (active power leaving the feeder at the head).
reverse_flow = "allow"

[search]
# Size of the generation steps tried at each node, kW.
step_kw = 50.0
# The reported hosting capacity is a multiple of this, kW.
resolution_kw = 1.0
# The search stops here; a node that reaches it reports limit "search_max", kW.
max_kw = 20000.0

[generation]
# Power factor of the new generation. 1.0 = unity, the default constant-power-factor setting of
# IEEE 1547-2018 unless the utility asks otherwise.
power_factor = 1.0
# Only used with power_factor < 1: true = the generation absorbs reactive power (lowers the
# voltage rise, mostly on overhead lines; little on cables).
absorbing = true

# Operating cases. Every load_kw/load_kvar is multiplied by load_scale and every existing
# gen_kw/gen_kvar by gen_scale. Light load with all existing generation running is the worst case
# for overvoltage; peak load without generation for thermal and undervoltage (common practice).
[[scenario]]
name = "min-load"
load_scale = 0.3
gen_scale = 1.0

[[scenario]]
name = "peak-load"
load_scale = 1.0
gen_scale = 0.0
"""


def main():
    here = os.path.dirname(os.path.abspath(__file__))
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--out", default=os.path.dirname(here),
                    help="feeders folder to write (default: the one holding tools/)")
    args = ap.parse_args()
    os.makedirs(args.out, exist_ok=True)
    write_conductors(args.out)
    with open(os.path.join(args.out, "study.toml"), "w", newline="\n") as out:
        out.write(STUDY_TOML)
    for make in FEEDERS:
        f = make()
        write_feeder(args.out, f)
        n_closed = sum(b["closed"] for b in f.branches)
        print(f"{f.fid}: {len(f.nodes)} nodes, {n_closed} closed branches, "
              f"{len(f.branches) - n_closed} open")


if __name__ == "__main__":
    main()
