#!/usr/bin/python3
"""Writes the demo readings for the fictional Quillfen Spur crude line.

    /usr/bin/python3 tools/make-demo-readings.py [--site config/demo/quillfen-site.json]
        [--out config/demo/quillfen-readings.csv] [--truth config/demo/quillfen-truth.json]

Four hours of SCADA-style readings (time,point,value,quality) for the site in
config/demo/quillfen-site.json, and the ground truth behind them. Standard
library only; deterministic (fixed seed): the same command writes the same
bytes. All data are invented.

The hydraulics are quasi-steady, simple on purpose, and mass-conserving by
construction:

* Crude density rho(P, T) = rho15 * exp((P - P0)/K - beta*(T - T0)), P0 =
  101325 Pa, T0 = 15 degC. rho15, K and beta are demo values, picked close to
  the API MPMS 11.1-style crude-oil correction that the core applies to the
  site's fluid (base density 862 kg/m3 at 60 degF): within 4e-5 of it at this
  line's conditions (14 to 19 degC, 0 to 48 bar gauge) and 3e-4 over 5 to 25
  degC and 0 to 60 bar, so that the fluid model is not what the demo is about.
* Pipe wall: A = A0 * (1 + c1*D/(E*e) * (P - Patm)) * (1 + 2*alpha_w*(T - 15 degC))
  (thin-wall elasticity, Wylie & Streeter, Fluid Transients in Systems, 1993,
  sec. 2.4; restraint factor c1 from the site file; thermal growth of the bore).
* Steady pressure profile: dP/dx = -rho*g*dz/dx - f*m|m|/(2*rho*D*A^2)
  (Darcy-Weisbach) with the Swamee & Jain (1976) friction factor, the
  elevation profile of the site file, the mass flow of each stretch (inlet;
  less the delivery after km 22; less the leak after its chainage), and the
  pressure at the tank end set by the tank head: rho*g*level + 1.2 bar of
  losses in the tank's loading line. The inlet pressure follows. After any
  change the actual profile relaxes towards the new steady one with a
  first-order time constant (PRESSURE_TAU_S).
* Temperature: each parcel enters at the inlet temperature and relaxes
  towards the ground temperature with the site's thermal time constant while
  it travels with the flow (parcel age tracked on the grid). The receiving
  tank's contents are taken to be at the temperature of the arriving oil,
  which is what the line's end temperature point (MB-TT-301, on the line at
  km 48) measures.
* Line pack: sum of rho*A*dx over 200 reaches at the actual (P, T).
* Tank: mass(t) = mass(0) + integral(inlet - delivery - leak) - (line pack(t)
  - line pack(0)); level from volume = mass / rho(Patm, T_tank) through the
  strapping table (inverse linear interpolation). The tank's outlet meter
  MB-FT-302 reads zero: the tank only fills.

Instruments: random noise with the sigma the site file declares (flows:
random_pct of reading; pressure 0.02 bar, temperature 0.05 K, level 0.5 mm),
fixed biases inside the declared systematic accuracy (listed in the truth
file), quantisation (flows 0.01, pressures 0.001 bar, temperatures 0.01,
level 0.1 mm) and a few blemishes: ten duplicated rows, three rows out of
order, one row flagged bad, one malformed row ('n/a').
"""

import argparse
import bisect
import datetime
import json
import math
import os
import random
import sys

# --------------------------------------------------------------------------
# Scenario (all invented).
# --------------------------------------------------------------------------
SEED = 20260314
START = datetime.datetime(2026, 3, 14, 6, 0, 0, tzinfo=datetime.timezone.utc)
DURATION_S = 4 * 3600
STEP_S = 1.0                        # simulation step
LEAK_START_S = 2 * 3600 + 10 * 60   # 02:10:00 after the start
LEAK_RAMP_S = 60.0
LEAK_FRACTION = 0.015               # of the inlet mass flow at the leak's start
LEAK_CHAINAGE_M = 31000.0
INLET_FLOW_M3_H = 900.0             # line volume at inlet conditions
DELIVERY_T_H = 150.0                # mass, Tallow Junction (km 22)
TANK_LEVEL_0_M = 5.2
TANK_LOADING_LOSS_PA = 1.2e5
INLET_T_C = 18.0
INLET_T_SWING_K = 0.5               # amplitude of a slow sinusoidal swing
INLET_T_PERIOD_S = 12 * 3600.0
PRESSURE_TAU_S = 180.0
REACHES = 200
SERIES_EVERY_S = 60

# Demo fluid (see the module docstring).
RHO15 = 862.40        # kg/m3 at 15 degC and 101325 Pa
BULK_MODULUS = 1.43e9  # Pa
BETA = 8.25e-4        # 1/K
P0 = 101325.0
T0 = 288.15
NU = 10.0e-6          # kinematic viscosity, m2/s (10 cSt), demo value
WALL_ALPHA = 1.2e-5   # linear thermal expansion of carbon steel, 1/K (common value)
G = 9.80665           # standard gravity (exact)

# Sampling: period and phase (s) of each point; flows and pressures every 2 s,
# temperatures every 10 s, level every 5 s.
SAMPLING = {
    "CF-FT-101": (2.0, 0.000), "CF-PT-101": (2.0, 0.050), "TJ-FT-201": (2.0, 0.400),
    "TJ-PT-201": (2.0, 0.450), "MB-FT-302": (2.0, 1.100), "MB-PT-301": (2.0, 1.150),
    "CF-TT-101": (10.0, 0.200), "MB-TT-301": (10.0, 5.300), "MB-LT-301": (5.0, 2.600),
}
POINT_ORDER = list(SAMPLING)
# The tank's own thermometer (the contents, here at the arriving temperature)
# came after the first version of this file: its readings are drawn from a
# stream of their own and merged in at the end, so that every other reading
# is what it always was.
TANK_THERMOMETER = "MB-TT-302"
TANK_THERMOMETER_SAMPLING = (10.0, 7.700)
JITTER_MS = 15  # timestamps jitter by up to this many milliseconds either way

# Fixed instrument biases, each inside the point's declared systematic accuracy
# (one sigma): flows 0.05 % of reading, pressures 0.05 bar, temperatures 0.2 K,
# level 3 mm.
BIAS = {
    "CF-FT-101": 0.0002,   # fraction of reading
    "TJ-FT-201": -0.0003,
    "MB-FT-302": 0.0,
    "CF-PT-101": 0.03,     # bar
    "TJ-PT-201": -0.02,
    "MB-PT-301": 0.01,
    "CF-TT-101": 0.08,     # K
    "MB-TT-301": -0.05,
    "MB-TT-302": 0.04,
    "MB-LT-301": 0.0015,   # m
}
DECIMALS = {"flow": 2, "pressure": 3, "temperature": 2, "level": 4}


def die(message):
    sys.stderr.write("make-demo-readings: %s\n" % message)
    sys.exit(2)


def quantity(q, unit_factors, what):
    """Converts {"value": v, "unit": u} with the given unit table."""
    if q["unit"] not in unit_factors:
        die("%s: unit %r not handled by this script" % (what, q["unit"]))
    factor, offset = unit_factors[q["unit"]]
    return q["value"] * factor + offset


PRESSURE_UNITS = {"Pa": (1.0, 0.0), "kPa": (1e3, 0.0), "bar": (1e5, 0.0), "MPa": (1e6, 0.0)}
TEMPERATURE_UNITS = {"K": (1.0, 0.0), "degC": (1.0, 273.15)}


def density(p, t):
    return RHO15 * math.exp((p - P0) / BULK_MODULUS - BETA * (t - T0))


def swamee_jain(reynolds, relative_roughness):
    # Swamee & Jain (1976), J. Hydraulics Division ASCE 102(5).
    x = math.log10(relative_roughness / 3.7 + 5.74 / reynolds ** 0.9)
    return 0.25 / (x * x)


class Line:
    """The pipe: grid, geometry and the steady profile."""

    def __init__(self, seg, p_atm):
        self.p_atm = p_atm
        self.sections = []
        x = 0.0
        for s in seg["sections"]:
            d = (s["outside_diameter_mm"] - 2.0 * s["wall_thickness_mm"]) * 1e-3
            e = s["wall_thickness_mm"] * 1e-3
            young = s["youngs_modulus_gpa"] * 1e9
            nu = s["poisson_ratio"]
            c1 = {"expansion_joints": 1.0, "anchored_upstream": 1.0 - nu / 2.0,
                  "anchored_throughout": 1.0 - nu * nu}[s["restraint"]]
            self.sections.append({
                "x0": x, "x1": x + s["length_m"], "d": d, "a0": math.pi * d * d / 4.0,
                "compliance": c1 * d / (young * e), "eps": s["roughness_mm"] * 1e-3,
            })
            x += s["length_m"]
        self.length = x
        prof = seg["elevation_profile"]
        self.prof_x = [p["chainage_m"] for p in prof]
        self.prof_z = [p["elevation_m"] for p in prof]

        # Reaches, spread over the sections by length.
        bounds = []
        for s in self.sections:
            n = max(1, round(REACHES * (s["x1"] - s["x0"]) / self.length))
            for i in range(n):
                bounds.append(s["x0"] + (s["x1"] - s["x0"]) * i / n)
        bounds.append(self.length)
        self.reach_lo = bounds[:-1]
        self.reach_hi = bounds[1:]
        mids = [(a + b) / 2.0 for a, b in zip(self.reach_lo, self.reach_hi)]
        # Integration nodes: reach bounds and midpoints, profile breakpoints,
        # the delivery point and the leak, so that each interval is one pipe,
        # one flow and one elevation slope.
        extra = [x for x in self.prof_x if 0.0 < x < self.length]
        extra += [s["x0"] for s in self.sections[1:]] + [LEAK_CHAINAGE_M]
        self.x = sorted(set([round(v, 6) for v in bounds + mids + extra]))
        self.n = len(self.x)
        self.z = [self.elevation(v) for v in self.x]
        self.mid_index = [self.x.index(round(m, 6)) for m in mids]
        self.dx = [b - a for a, b in zip(self.reach_lo, self.reach_hi)]
        # Section of each interval [x[k], x[k+1]] and of each node (a node on a
        # section boundary belongs to the downstream section).
        self.sec_of_interval = [self.section_index((self.x[k] + self.x[k + 1]) / 2.0)
                                for k in range(self.n - 1)]
        self.sec_of_node = [self.section_index(v) for v in self.x]

    def section_index(self, x):
        for i, s in enumerate(self.sections):
            if x < s["x1"]:
                return i
        return len(self.sections) - 1

    def elevation(self, x):
        px, pz = self.prof_x, self.prof_z
        if x <= px[0]:
            return pz[0]
        if x >= px[-1]:
            return pz[-1]
        k = bisect.bisect_right(px, x) - 1
        w = (x - px[k]) / (px[k + 1] - px[k])
        return pz[k] + w * (pz[k + 1] - pz[k])

    def area(self, node, p, t):
        s = self.sections[self.sec_of_node[node]]
        return s["a0"] * (1.0 + s["compliance"] * (p - self.p_atm)) * (1.0 + 2.0 * WALL_ALPHA * (t - T0))

    def flow_at(self, xm, m_in, m_delivery, m_leak, x_delivery):
        m = m_in
        if xm > x_delivery:
            m -= m_delivery
        if xm > LEAK_CHAINAGE_M:
            m -= m_leak
        return m

    def steady_profile(self, p_end, temps, m_in, m_delivery, m_leak, x_delivery):
        """Absolute pressure at every node, integrated upstream from the tank end (Heun)."""
        n = self.n
        p = [0.0] * n
        p[-1] = p_end
        # Friction per (section, flow): the Reynolds number uses rho15 (the
        # density varies by a few parts per thousand along the line).
        k_fr_of = {}
        for k in range(n - 2, -1, -1):
            sec = self.sec_of_interval[k]
            xm = 0.5 * (self.x[k] + self.x[k + 1])
            m = self.flow_at(xm, m_in, m_delivery, m_leak, x_delivery)
            k_fr = k_fr_of.get((sec, m))
            if k_fr is None:
                s = self.sections[sec]
                d, a0 = s["d"], s["a0"]
                if m == 0.0:
                    k_fr = 0.0
                else:
                    re = abs(m) * d / (a0 * RHO15 * NU)
                    f = swamee_jain(re, s["eps"]) if re > 2000.0 else 64.0 / re
                    k_fr = f * m * abs(m) / (2.0 * d * a0 * a0)  # friction gradient * rho
                k_fr_of[(sec, m)] = k_fr
            dx = self.x[k + 1] - self.x[k]
            dz = self.z[k + 1] - self.z[k]
            rho_b = density(p[k + 1], temps[k + 1])
            # dP/dx = -rho g dz/dx - k_fr / rho; going upstream P rises by the loss.
            rise_b = rho_b * G * dz + k_fr / rho_b * dx
            rho_a = density(p[k + 1] + rise_b, temps[k])
            rise_a = rho_a * G * dz + k_fr / rho_a * dx
            p[k] = p[k + 1] + 0.5 * (rise_a + rise_b)
        return p

    def linepack(self, p, temps):
        mass = 0.0
        for r, node in enumerate(self.mid_index):
            pr, tr = p[node], temps[node]
            mass += density(pr, tr) * self.area(node, pr, tr) * self.dx[r]
        return mass

    def node_at(self, x):
        k = bisect.bisect_left(self.x, x - 1e-6)
        if k >= self.n or abs(self.x[k] - x) > 1e-3:
            die("no grid node at chainage %g m" % x)
        return k


def strap_volume(rows, level):
    for (l0, v0), (l1, v1) in zip(rows, rows[1:]):
        if level <= l1:
            return v0 + (v1 - v0) * (level - l0) / (l1 - l0)
    die("tank level %.3f m above the strapping table" % level)


def strap_level(rows, volume):
    for (l0, v0), (l1, v1) in zip(rows, rows[1:]):
        if volume <= v1:
            return l0 + (l1 - l0) * (volume - v0) / (v1 - v0)
    die("tank volume %.1f m3 above the strapping table" % volume)


def inlet_flow_m3_h(t):
    """About 900 m3/h with slow, small variations (two incommensurate swings)."""
    return INLET_FLOW_M3_H * (1.0 + 0.008 * math.sin(2.0 * math.pi * t / 5400.0 + 0.7)
                              + 0.004 * math.sin(2.0 * math.pi * t / 2100.0 + 2.1))


def inlet_temperature_k(t):
    return 273.15 + INLET_T_C + INLET_T_SWING_K * math.sin(2.0 * math.pi * (t - 3600.0) / INLET_T_PERIOD_S)


def leak_kg_s(t, rate):
    if t <= LEAK_START_S:
        return 0.0
    return rate * min(1.0, (t - LEAK_START_S) / LEAK_RAMP_S)


def iso(ms):
    d = START + datetime.timedelta(milliseconds=ms)
    return d.strftime("%Y-%m-%dT%H:%M:%S") + ".%03dZ" % (ms % 1000)


def main():
    here = os.path.dirname(os.path.abspath(__file__))
    root = os.path.dirname(here)
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--site", default=os.path.join(root, "config/demo/quillfen-site.json"))
    ap.add_argument("--out", default=os.path.join(root, "config/demo/quillfen-readings.csv"))
    ap.add_argument("--truth", default=os.path.join(root, "config/demo/quillfen-truth.json"))
    args = ap.parse_args()

    with open(args.site) as f:
        site_doc = json.load(f)
    seg = site_doc["segments"][0]
    p_atm = quantity(site_doc["site"]["atmospheric_pressure"], PRESSURE_UNITS, "atmospheric_pressure")
    tm = seg["temperature_model"]
    t_ground = quantity(tm["ground_temperature"], TEMPERATURE_UNITS, "ground_temperature")
    tau_thermal = float(tm["thermal_time_constant_s"])
    points = site_doc["points"]
    for pid in POINT_ORDER:
        if pid not in points:
            die("point %s not in %s" % (pid, args.site))
    tank = seg["tanks"][0]
    strap = [tuple(r) for r in tank["strapping_table"]["rows"]]
    if tank["strapping_table"].get("level_unit", "m") != "m" or tank["strapping_table"].get("volume_unit", "m3") != "m3":
        die("strapping table units other than m and m3 are not handled")
    meters = {m["point"]: m for m in seg["meters"]}
    x_delivery = float(meters["TJ-FT-201"]["chainage_m"])
    gauges = {g["point"]: g for g in seg["pressure_points"]}

    line = Line(seg, p_atm)
    n = line.n
    i_in = 0
    i_out = n - 1
    gauge_node = {pid: line.node_at(float(g["chainage_m"])) for pid, g in gauges.items()}
    # A transmitter above (below) the pipe reads less (more) by the static head
    # of its impulse line.
    gauge_dz = {pid: float(g["elevation_m"]) - line.z[gauge_node[pid]] for pid, g in gauges.items()}

    m_delivery = DELIVERY_T_H * 1000.0 / 3600.0

    # ---------------------------------------------------------------- state at t = 0
    # Parcel age at each node for steady flow (time since it left the inlet).
    def velocities(p, temps, m_in, m_leak):
        u = []
        for k in range(n):
            m = line.flow_at(line.x[k], m_in, m_delivery, m_leak, x_delivery)
            u.append(m / (density(p[k], temps[k]) * line.area(k, p[k], temps[k])))
        return u

    def temperatures(t, age):
        out = []
        for a in age:
            decay = math.exp(-a / tau_thermal)
            out.append(t_ground + (inlet_temperature_k(t - a) - t_ground) * decay)
        return out

    # First guess of the state, refined twice (age <- velocity <- P, T).
    q0 = inlet_flow_m3_h(0.0) / 3600.0
    temps = [inlet_temperature_k(0.0)] * n
    p = [p_atm + 40e5 * (1.0 - v / line.length) for v in line.x]
    level = TANK_LEVEL_0_M
    for _ in range(3):
        m_in = q0 * density(p[i_in], temps[i_in])
        u = velocities(p, temps, m_in, 0.0)
        age = [0.0] * n
        for k in range(1, n):
            age[k] = age[k - 1] + (line.x[k] - line.x[k - 1]) * 2.0 / (u[k] + u[k - 1])
        temps = temperatures(0.0, age)
        t_tank = temps[i_out]
        p_end = p_atm + density(p_atm, t_tank) * G * level + TANK_LOADING_LOSS_PA
        p = line.steady_profile(p_end, temps, m_in, m_delivery, 0.0, x_delivery)
    m_in = q0 * density(p[i_in], temps[i_in])
    t_tank = temps[i_out]
    tank_mass = strap_volume(strap, level) * density(p_atm, t_tank)
    linepack = line.linepack(p, temps)
    leak_rate = None
    leak = 0.0

    # True values per second for every point, in the point's own unit.
    steps = int(round(DURATION_S / STEP_S))
    truth_series = {pid: [0.0] * (steps + 2) for pid in POINT_ORDER + [TANK_THERMOMETER]}
    series = []

    def record(i, t):
        truth_series["CF-FT-101"][i] = m_in / density(p[i_in], temps[i_in]) * 3600.0
        truth_series["TJ-FT-201"][i] = DELIVERY_T_H
        truth_series["MB-FT-302"][i] = 0.0
        for pid, node in gauge_node.items():
            rho = density(p[node], temps[node])
            truth_series[pid][i] = (p[node] - rho * G * gauge_dz[pid] - p_atm) / 1e5
        truth_series["CF-TT-101"][i] = temps[i_in] - 273.15
        truth_series["MB-TT-301"][i] = temps[i_out] - 273.15
        truth_series["MB-TT-302"][i] = t_tank - 273.15
        truth_series["MB-LT-301"][i] = level
        if i % int(SERIES_EVERY_S / STEP_S) == 0:
            series.append({
                "time": iso(int(round(t * 1000))),
                "linepack_kg": round(linepack, 1),
                "tank_kg": round(tank_mass, 1),
                "inventory_kg": round(linepack + tank_mass, 1),
                "inlet_kg_s": round(m_in, 4),
                "leak_kg_s": round(leak, 4),
                "tank_level_m": round(level, 5),
                "inlet_pressure_barg": round((p[i_in] - p_atm) / 1e5, 4),
                "mean_temperature_c": round(sum(temps) / n - 273.15, 4),
            })

    record(0, 0.0)
    leaked_kg = 0.0
    decay_p = math.exp(-STEP_S / PRESSURE_TAU_S)
    for i in range(1, steps + 2):
        t = i * STEP_S
        # Leak: a fixed fraction of the inlet mass flow when it starts.
        if leak_rate is None and t > LEAK_START_S:
            leak_rate = LEAK_FRACTION * m_in
        leak_prev = leak
        leak = leak_kg_s(t, leak_rate or 0.0)
        # Temperatures: carry the parcel ages with the flow (semi-Lagrangian).
        u = velocities(p, temps, m_in, leak_prev)
        new_age = [0.0] * n
        for k in range(1, n):
            xd = line.x[k] - u[k] * STEP_S
            if xd <= 0.0:  # entered during this step
                new_age[k] = line.x[k] / u[k]
                continue
            j = bisect.bisect_right(line.x, xd) - 1
            w = (xd - line.x[j]) / (line.x[j + 1] - line.x[j])
            new_age[k] = age[j] + w * (age[j + 1] - age[j]) + STEP_S
        age = new_age
        temps = temperatures(t, age)
        t_tank = temps[i_out]
        # Pressures: relax towards the steady profile for the present flows
        # and tank level.
        q = inlet_flow_m3_h(t) / 3600.0
        m_in_guess = q * density(p[i_in], temps[i_in])
        p_end = p_atm + density(p_atm, t_tank) * G * level + TANK_LOADING_LOSS_PA
        p_ss = line.steady_profile(p_end, temps, m_in_guess, m_delivery, leak, x_delivery)
        p = [ps + (pp - ps) * decay_p for ps, pp in zip(p_ss, p)]
        m_in_prev = m_in
        m_in = q * density(p[i_in], temps[i_in])
        # Mass balance of the control volume: whatever the line does not keep
        # (or lose) goes to the tank.
        linepack_prev = linepack
        linepack = line.linepack(p, temps)
        flow_in = 0.5 * (m_in + m_in_prev) * STEP_S
        leaked = 0.5 * (leak + leak_prev) * STEP_S
        leaked_kg += leaked
        tank_mass += flow_in - m_delivery * STEP_S - leaked - (linepack - linepack_prev)
        level = strap_level(strap, tank_mass / density(p_atm, t_tank))
        record(i, t)

    # ---------------------------------------------------------------- readings
    rng = random.Random(SEED)
    rows = []  # (time_ms, order, point, value text)
    for order, pid in enumerate(POINT_ORDER):
        period, phase = SAMPLING[pid]
        spec = points[pid]
        kind = spec["kind"]
        acc = spec["accuracy"]
        decimals = DECIMALS[kind]
        k = 0
        while True:
            t = phase + k * period
            k += 1
            if t > DURATION_S:
                break
            ms = int(round(t * 1000)) + rng.randint(-JITTER_MS, JITTER_MS)
            ms = max(ms, 0)
            ts = ms / 1000.0
            j = min(int(ts // STEP_S), steps)
            w = ts / STEP_S - j
            s = truth_series[pid]
            true = s[j] + w * (s[j + 1] - s[j])
            if kind == "flow":
                value = true * (1.0 + BIAS[pid]) + rng.gauss(0.0, acc["random_pct"] / 100.0 * abs(true))
            else:
                value = true + BIAS[pid] + rng.gauss(0.0, acc["random"])
            text = "%.*f" % (decimals, value)
            if text.startswith("-") and float(text) == 0.0:
                text = text[1:]
            rows.append((ms, order, pid, text))
    rows.sort()
    lines = ["%s,%s,%s,good" % (iso(ms), pid, text) for ms, _, pid, text in rows]

    # Blemishes, at separate places in the second half of the first hour and
    # later (away from the start, where the core is still filling its windows).
    def pick(lo_s, hi_s, pid=None):
        while True:
            i = rng.randrange(len(rows))
            ms, _, p_id, _ = rows[i]
            if lo_s * 1000 <= ms <= hi_s * 1000 and (pid is None or p_id == pid) and i not in taken:
                for d in range(-30, 31):
                    taken.add(i + d)
                return i

    taken = set()
    blemishes = {"duplicated": [], "out_of_order": [], "bad_quality": [], "malformed": []}
    edits = {}  # row index -> replacement list of lines (in order)
    for _ in range(10):
        i = pick(1800, DURATION_S - 60)
        edits[i] = [lines[i], lines[i]]
        blemishes["duplicated"].append(rows[i][2] + " " + iso(rows[i][0]))
    moved = []
    for pid in ("CF-PT-101", "TJ-FT-201", "MB-PT-301"):
        i = pick(1800, DURATION_S - 60, pid)
        # Delivered about 10 s late, after newer readings of the same point.
        target = bisect.bisect_right([r[0] for r in rows], rows[i][0] + 10500)
        moved.append((i, target))
        blemishes["out_of_order"].append(rows[i][2] + " " + iso(rows[i][0]))
    i = pick(1800, DURATION_S - 60, "TJ-PT-201")
    edits[i] = [lines[i][: -len("good")] + "bad"]
    blemishes["bad_quality"].append(rows[i][2] + " " + iso(rows[i][0]))
    i = pick(1800, DURATION_S - 60, "MB-LT-301")
    ms, _, pid, _ = rows[i]
    edits[i] = ["%s,%s,n/a,good" % (iso(ms), pid)]
    blemishes["malformed"].append(pid + " " + iso(ms))
    out_lines = []
    inserts = {}
    for i, target in moved:
        edits[i] = []
        inserts.setdefault(target, []).append(lines[i])
    for i, text in enumerate(lines):
        for extra in inserts.get(i, []):
            out_lines.append(extra)
        out_lines.extend(edits.get(i, [text]))

    rng_tank = random.Random(SEED + 302)
    tank_rows = []
    period, phase = TANK_THERMOMETER_SAMPLING
    acc = points[TANK_THERMOMETER]["accuracy"]
    k = 0
    while True:
        t = phase + k * period
        k += 1
        if t > DURATION_S:
            break
        ms = max(int(round(t * 1000)) + rng_tank.randint(-JITTER_MS, JITTER_MS), 0)
        ts = ms / 1000.0
        j = min(int(ts // STEP_S), steps)
        w = ts / STEP_S - j
        s = truth_series[TANK_THERMOMETER]
        true = s[j] + w * (s[j + 1] - s[j])
        value = true + BIAS[TANK_THERMOMETER] + rng_tank.gauss(0.0, acc["random"])
        tank_rows.append("%s,%s,%.*f,good" % (iso(ms), TANK_THERMOMETER, DECIMALS["temperature"], value))
    merged, j = [], 0
    for row in tank_rows:
        stamp = row[:24]
        while j < len(out_lines) and out_lines[j][:24] <= stamp:
            merged.append(out_lines[j])
            j += 1
        merged.append(row)
    merged.extend(out_lines[j:])
    out_lines = merged

    with open(args.out, "w", newline="\n") as f:
        f.write("time,point,value,quality\n")
        f.write("\n".join(out_lines))
        f.write("\n")

    # ---------------------------------------------------------------- truth
    def line_of(reading):
        pid, stamp = reading.split(" ")
        hits = [k + 2 for k, text in enumerate(out_lines) if text.startswith(stamp + "," + pid + ",")]
        return hits

    truth = {
        "description": "Ground truth of config/demo/quillfen-readings.csv (fictional Quillfen Spur crude line; "
                       "invented data, written by tools/make-demo-readings.py)",
        "generator": {"script": "tools/make-demo-readings.py", "seed": SEED, "step_s": STEP_S},
        "start": iso(0),
        "end": iso(DURATION_S * 1000),
        "leak": {
            "start": iso(LEAK_START_S * 1000),
            "ramp_s": LEAK_RAMP_S,
            "rate_kg_s": round(leak_rate, 4),
            "fraction_of_inlet_mass_flow": LEAK_FRACTION,
            "chainage_m": LEAK_CHAINAGE_M,
            "mass_lost_kg": round(leaked_kg, 1),
        },
        "operation": {
            "inlet_line_volume_flow_m3_h": "900 * (1 + 0.008 sin(2 pi t/5400 s + 0.7) + 0.004 sin(2 pi t/2100 s + 2.1))",
            "delivery_t_h": DELIVERY_T_H,
            "tank_outflow_m3_h": 0.0,
            "inlet_temperature_c": "18 + 0.5 sin(2 pi (t - 3600 s)/43200 s)",
            "ground_temperature_c": round(t_ground - 273.15, 3),
            "thermal_time_constant_s": tau_thermal,
            "pressure_time_constant_s": PRESSURE_TAU_S,
            "tank_loading_line_loss_bar": TANK_LOADING_LOSS_PA / 1e5,
            "tank_level_start_m": TANK_LEVEL_0_M,
        },
        "fluid_model": {
            "density": "rho15 * exp((P - 101325 Pa)/K - beta*(T - 288.15 K))",
            "rho15_kg_m3": RHO15, "bulk_modulus_pa": BULK_MODULUS, "beta_per_k": BETA,
            "kinematic_viscosity_m2_s": NU,
            "note": "demo values, close to the API MPMS 11.1-style crude correction the core uses for the site fluid",
        },
        "instrument_biases": {
            "flows_fraction_of_reading": {k: BIAS[k] for k in ("CF-FT-101", "TJ-FT-201", "MB-FT-302")},
            "pressures_bar": {k: BIAS[k] for k in ("CF-PT-101", "TJ-PT-201", "MB-PT-301")},
            "temperatures_k": {k: BIAS[k] for k in ("CF-TT-101", "MB-TT-301", "MB-TT-302")},
            "level_m": {"MB-LT-301": BIAS["MB-LT-301"]},
        },
        "blemishes": {k: [{"reading": v, "csv_lines": line_of(v)} for v in vs] for k, vs in blemishes.items()},
        "series_every_s": SERIES_EVERY_S,
        "series": series[: DURATION_S // SERIES_EVERY_S + 1],
    }
    with open(args.truth, "w") as f:
        json.dump(truth, f, indent=1)
        f.write("\n")

    size = os.path.getsize(args.out)
    first, last = series[0], series[DURATION_S // SERIES_EVERY_S]
    sys.stderr.write(
        "wrote %s (%d rows, %.2f MB) and %s\n"
        "leak %.3f kg/s at %.0f m from %s; line pack %.1f -> %.1f t, tank %.1f -> %.1f t, level %.3f -> %.3f m\n"
        % (args.out, len(out_lines), size / 1e6, args.truth, leak_rate, LEAK_CHAINAGE_M, iso(LEAK_START_S * 1000),
           first["linepack_kg"] / 1e3, last["linepack_kg"] / 1e3, first["tank_kg"] / 1e3, last["tank_kg"] / 1e3,
           first["tank_level_m"], last["tank_level_m"]))


if __name__ == "__main__":
    main()
