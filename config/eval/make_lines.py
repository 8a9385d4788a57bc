#!/usr/bin/env python3
"""Writes the invented evaluation lines of config/eval (see config/EVALUATE.md).

All names, places and figures are invented. Run from anywhere:
  python3 config/eval/make_lines.py
It rewrites *-site.json, *-scenario.json and *-batch*.json beside it.
"""
import json, math, os

HERE = os.path.dirname(os.path.abspath(__file__))

def q(v, u): return {"value": v, "unit": u}

def flow_pt(unit, rng, stale=30, rnd=0.10, sysm=0.05):
    return {"kind": "flow", "unit": unit, "staleness_s": stale,
            "accuracy": {"random_pct": rnd, "systematic_pct": sysm}, "range": rng}
def p_pt(stale=120):
    return {"kind": "pressure", "unit": "bar", "reference": "gauge", "staleness_s": stale,
            "accuracy": {"random": 0.02, "systematic": 0.05}, "range": [0, 150]}
def t_pt(stale=180):
    return {"kind": "temperature", "unit": "degC", "staleness_s": stale,
            "accuracy": {"random": 0.05, "systematic": 0.2}, "range": [-10, 60]}
def l_pt(top, stale=180):
    return {"kind": "level", "unit": "m", "staleness_s": stale,
            "accuracy": {"random": 0.0005, "systematic": 0.003}, "range": [0, top]}

def section(length, od, wt, rough=0.045):
    return {"length_m": length, "outside_diameter_mm": od, "wall_thickness_mm": wt,
            "youngs_modulus_gpa": 207, "poisson_ratio": 0.3, "restraint": "anchored_throughout",
            "roughness_mm": rough}

def site(name, fluids, points, seg):
    return {"format": "holdfast-site/1",
            "site": {"name": name, "atmospheric_pressure": q(100.8, "kPa"),
                     "standard_conditions": {"pressure": q(101.325, "kPa"), "temperature": q(15, "degC")},
                     "tick_s": 1},
            "fluids": fluids, "points": points, "segments": [seg]}

def seg_common(seg, ground, tau=36000):
    seg["temperature_model"] = {"filter_s": 300, "ground_temperature": q(ground, "degC"),
                                "thermal_time_constant_s": tau}
    seg["balance"] = {"windows_s": [300, 3600, 86400], "buckets_per_window": 60, "confidence": 0.95}
    return seg

def write(name, doc):
    with open(os.path.join(HERE, name), "w") as f:
        json.dump(doc, f, indent=1)
        f.write("\n")

def batch(name, scenario, lead_fractions, chainages, daily_ops, shut_every, shut_at, shut_s, spread,
          families, observe=7200, tuning_days=3, seeds=(1, 2, 3), lead=7200):
    b = {"format": "holdfast-batch/1",
         "_comment": "Invented line (config/EVALUATE.md, 'Evaluation lines'). Clock onsets at every hour with the daily operations, a cycled design, ruptures, standard and rough instruments.",
         "name": name, "scenario": scenario, "time_step_s": 1.0, "budget_days": 90,
         "instrument_families": families,
         "tuning": {"days": tuning_days, "seed": 101},
         "leak_free": {"days": 30, "seed": 202, "daily_operations": daily_ops,
                       "shut_in_every_days": shut_every, "shut_in_at_s": shut_at, "shut_in_s": shut_s,
                       "inlet_daily_spread_k": spread},
         "grid": {"leak_fractions_pct": lead_fractions, "chainages_m": chainages,
                  "onset_hours": list(range(24)), "lead_s": lead, "onsets_during_operations": True,
                  "design": "cycle", "seeds": list(seeds), "ramp_s": 60, "observe_s": observe},
         "ruptures": {"fractions_pct": [10, 30], "ramp_s": 2, "observe_s": 1800},
         "baseline": {"windows_s": [600, 3600, 14400]}}
    return b

# ---------------------------------------------------------------------------
# a. Zellmoor products line: gasoline, pump on a curve, a delivery closed
#    12 h a day, a control valve into the Ostrevane depot tank (outside).
# ---------------------------------------------------------------------------
A_L = 60000
a_points = {
    "ZM-FT-101": flow_pt("m3/h", [0, 900]),
    "ZM-PT-101": p_pt(), "ZM-TT-101": t_pt(),
    "ZM-PT-102": p_pt(),
    "PV-FT-201": flow_pt("m3/h", [0, 400]),
    "PV-PT-201": p_pt(),
    "OV-FT-301": flow_pt("m3/h", [0, 900]),
    "OV-PT-301": p_pt(), "OV-TT-301": t_pt(),
}
a_seg = seg_common({
    "id": "ZM-1", "name": "Zellmoor terminal to Ostrevane depot (invented)",
    "fluid": "zellmoor_gasoline", "reach_length_m": 500,
    "sections": [section(A_L, 323.9, 7.1)],
    "elevation_profile": [{"chainage_m": 0, "elevation_m": 20}, {"chainage_m": 15000, "elevation_m": 60},
                          {"chainage_m": 40000, "elevation_m": 35}, {"chainage_m": A_L, "elevation_m": 15}],
    "meters": [
        {"point": "ZM-FT-101", "role": "inlet", "type": "line_volume", "chainage_m": 0,
         "pressure_point": "ZM-PT-101", "temperature_point": "ZM-TT-101"},
        {"point": "PV-FT-201", "role": "delivery", "type": "line_volume", "chainage_m": 25000,
         "pressure_point": "PV-PT-201", "temperature_point": "ZM-TT-101"},
        {"point": "OV-FT-301", "role": "outlet", "type": "line_volume", "chainage_m": A_L,
         "pressure_point": "OV-PT-301", "temperature_point": "OV-TT-301"}],
    "pressure_points": [
        {"point": "ZM-PT-101", "chainage_m": 0, "elevation_m": 20},
        {"point": "ZM-PT-102", "chainage_m": 15000, "elevation_m": 60},
        {"point": "PV-PT-201", "chainage_m": 25000, "elevation_m": 50},
        {"point": "OV-PT-301", "chainage_m": A_L, "elevation_m": 15}],
    "temperature_points": [{"point": "ZM-TT-101", "chainage_m": 0}, {"point": "OV-TT-301", "chainage_m": A_L}],
    "landmarks": [{"name": "Zellmoor pump station", "chainage_m": 0},
                  {"name": "Block valve Z-3 (Hobbel ridge)", "chainage_m": 15000},
                  {"name": "Pellivar delivery", "chainage_m": 25000},
                  {"name": "Ostrevane depot control valve", "chainage_m": A_L}],
    "nominal_flow": q(500, "m3/h")}, 14)
write("zellmoor-site.json", site("Zellmoor products line (invented evaluation line)",
      {"zellmoor_gasoline": {"model": "refined_product", "product": "gasoline", "base_density": q(742, "kg/m3")}},
      a_points, a_seg))
a_instr = {pid: {"quantum": 0.01 if a_points[pid]["kind"] == "flow" else (0.001 if a_points[pid]["kind"] == "pressure" else 0.01),
                 "phase_s": round(0.07 * i, 2)} for i, pid in enumerate(a_points)}
a_instr["PV-FT-201"]["low_flow_cutoff"] = 2.0
write("zellmoor-scenario.json", {
    "format": "holdfast-scenario/1",
    "_comment": "Invented base scenario of the Zellmoor products line: pump on its curve, Pellivar delivery open (the batch closes it 08:00-20:00), control valve into the Ostrevane depot tank outside the segment. The batch adds operations and leaks.",
    "name": "Zellmoor evaluation base", "segment": "ZM-1", "start": "2026-05-04T00:00:00Z",
    "duration_s": 43200, "seed": 1, "time_step_s": 1.0,
    "upstream": {"type": "pump", "suction_head_m": 25, "shutoff_head_m": 560, "rated_flow": q(500, "m3/h"),
                 "rated_head_m": 450},
    "downstream": {"type": "reservoir", "head_m": 30,
                   "valve": {"pressure_drop": q(3.0, "bar"), "at_flow": q(420, "m3/h")}},
    "laterals": {"PV-FT-201": {"flow": q(150, "m3/h")}},
    "temperature": {"inlet": q(16, "degC"), "swing": {"amplitude_k": 1.5, "period_s": 86400, "phase_s": 36000}},
    "instrument_defaults": {"sample_period_s": 1, "jitter_s": 0.015, "latency_s": 0.3, "latency_spread_s": 0.5},
    "instruments": a_instr})
a_ops = [
    {"at_s": 28800, "action": "setpoint", "target": "PV-FT-201", "flow": q(0, "m3/h"), "ramp_s": 120},
    {"at_s": 46800, "action": "valve", "opening": 0.8, "ramp_s": 60},
    {"at_s": 61200, "action": "valve", "opening": 1.0, "ramp_s": 60},
    {"at_s": 72000, "action": "setpoint", "target": "PV-FT-201", "flow": q(150, "m3/h"), "ramp_s": 120}]
a_ch = [6000, 20000, 33000, 47000, 56000]
# An 8 h lead: a leak late in the 12 h closure meets a monitor that has seen
# the delivery meter at zero for more than 6 h, as it would after days of
# running (a 2 h lead hides that; see config/EVALUATE.md).
write("zellmoor-batch.json", batch("Zellmoor products line", "zellmoor-scenario.json", [0.5, 1, 2, 5], a_ch,
      a_ops, 7, 36000, 14400, 1.0, ["standard", "rough"], lead=28800))


# ---------------------------------------------------------------------------
# b. Ancrell water main: pump on a curve over the Tamsel ridge (high point),
#    into the Corrand service reservoir behind a valve; shut in 9 h a night.
# ---------------------------------------------------------------------------
B_L = 25000
b_points = {
    "AN-FT-101": flow_pt("m3/h", [0, 2500]),
    "AN-PT-101": p_pt(), "AN-TT-101": t_pt(),
    "TR-PT-201": p_pt(),
    "CR-FT-301": flow_pt("m3/h", [0, 2500]),
    "CR-PT-301": p_pt(), "CR-TT-301": t_pt(),
}
b_seg = seg_common({
    "id": "AN-1", "name": "Ancrell pumping station to Corrand reservoir (invented)",
    "fluid": "ancrell_water", "reach_length_m": 500,
    "sections": [section(B_L, 610.0, 8.0, 0.05)],
    "elevation_profile": [{"chainage_m": 0, "elevation_m": 40}, {"chainage_m": 6000, "elevation_m": 95},
                          {"chainage_m": 11000, "elevation_m": 140}, {"chainage_m": 16000, "elevation_m": 110},
                          {"chainage_m": B_L, "elevation_m": 100}],
    "meters": [
        {"point": "AN-FT-101", "role": "inlet", "type": "line_volume", "chainage_m": 0,
         "pressure_point": "AN-PT-101", "temperature_point": "AN-TT-101"},
        {"point": "CR-FT-301", "role": "outlet", "type": "line_volume", "chainage_m": B_L,
         "pressure_point": "CR-PT-301", "temperature_point": "CR-TT-301"}],
    "pressure_points": [
        {"point": "AN-PT-101", "chainage_m": 0, "elevation_m": 40},
        {"point": "TR-PT-201", "chainage_m": 11000, "elevation_m": 140},
        {"point": "CR-PT-301", "chainage_m": B_L, "elevation_m": 100}],
    "temperature_points": [{"point": "AN-TT-101", "chainage_m": 0}, {"point": "CR-TT-301", "chainage_m": B_L}],
    "landmarks": [{"name": "Ancrell pumping station", "chainage_m": 0},
                  {"name": "Tamsel ridge air valve", "chainage_m": 11000},
                  {"name": "Corrand reservoir inlet valve", "chainage_m": B_L}],
    "nominal_flow": q(1400, "m3/h")}, 11, 43200)
write("ancrell-site.json", site("Ancrell water main (invented evaluation line)",
      {"ancrell_water": {"model": "water"}}, b_points, b_seg))
b_instr = {pid: {"quantum": 0.1 if b_points[pid]["kind"] == "flow" else (0.001 if b_points[pid]["kind"] == "pressure" else 0.01),
                 "phase_s": round(0.09 * i, 2)} for i, pid in enumerate(b_points)}
write("ancrell-scenario.json", {
    "format": "holdfast-scenario/1",
    "_comment": "Invented base scenario of the Ancrell water main: the pump lifts over the Tamsel ridge (140 m at km 11) into the Corrand reservoir behind its inlet valve. The batch shuts the main in every night from 22:00 to 07:00 and adds leaks.",
    "name": "Ancrell evaluation base", "segment": "AN-1", "start": "2026-06-01T00:00:00Z",
    "duration_s": 43200, "seed": 1, "time_step_s": 1.0,
    "upstream": {"type": "pump", "suction_head_m": 42, "shutoff_head_m": 200, "rated_flow": q(1400, "m3/h"),
                 "rated_head_m": 146},
    "downstream": {"type": "reservoir", "head_m": 112,
                   "valve": {"pressure_drop": q(1.3, "bar"), "at_flow": q(1400, "m3/h")}},
    "temperature": {"inlet": q(12, "degC"), "swing": {"amplitude_k": 0.5, "period_s": 86400, "phase_s": 43200}},
    "instrument_defaults": {"sample_period_s": 1, "jitter_s": 0.015, "latency_s": 0.3, "latency_spread_s": 0.5},
    "instruments": b_instr})
b_ops = [
    {"at_s": 25200, "action": "restart", "ramp_s": 120},
    {"at_s": 43200, "action": "pump_speed", "speed": 0.92, "ramp_s": 60},
    {"at_s": 61200, "action": "pump_speed", "speed": 1.0, "ramp_s": 60},
    {"at_s": 79200, "action": "shut_in", "ramp_s": 120}]
b_ch = [3000, 9000, 14000, 20000]
# The nightly shut-in is a daily operation (leak runs get it too); no weekly one.
write("ancrell-batch.json", batch("Ancrell water main", "ancrell-scenario.json", [0.5, 1, 2, 5], b_ch,
      b_ops, 0, 36000, 14400, 0.5, ["standard", "rough"]))

# ---------------------------------------------------------------------------
# c. Morvath crude trunk: long, large diameter, the Eskeld injection on 4 h a
#    day, the Drumlay tank at the end inside the segment.
# ---------------------------------------------------------------------------
C_L = 90000
c_points = {
    "MV-FT-101": flow_pt("m3/h", [0, 2200]),
    "MV-PT-101": p_pt(), "MV-TT-101": t_pt(),
    "MV-PT-102": p_pt(),
    "EK-FT-201": flow_pt("m3/h", [0, 500]),
    "EK-PT-201": p_pt(),
    "DL-PT-301": p_pt(), "DL-TT-301": t_pt(), "DL-TT-302": t_pt(),
    "DL-LT-301": l_pt(16),
    "DL-FT-302": flow_pt("m3/h", [0, 3000]),
}
area = math.pi / 4 * 40.0 ** 2
c_seg = seg_common({
    "id": "MV-1", "name": "Morvath field station to Drumlay tank farm (invented)",
    "fluid": "morvath_crude", "reach_length_m": 500,
    "sections": [section(C_L, 508.0, 9.5)],
    "elevation_profile": [{"chainage_m": 0, "elevation_m": 50}, {"chainage_m": 30000, "elevation_m": 120},
                          {"chainage_m": 60000, "elevation_m": 90}, {"chainage_m": C_L, "elevation_m": 10}],
    "meters": [
        {"point": "MV-FT-101", "role": "inlet", "type": "line_volume", "chainage_m": 0,
         "pressure_point": "MV-PT-101", "temperature_point": "MV-TT-101"},
        {"point": "EK-FT-201", "role": "injection", "type": "mass", "chainage_m": 40000},
        {"point": "DL-FT-302", "role": "outlet", "type": "line_volume", "chainage_m": C_L,
         "pressure_point": "DL-PT-301", "temperature_point": "DL-TT-301"}],
    "pressure_points": [
        {"point": "MV-PT-101", "chainage_m": 0, "elevation_m": 50},
        {"point": "MV-PT-102", "chainage_m": 30000, "elevation_m": 120},
        {"point": "EK-PT-201", "chainage_m": 40000, "elevation_m": 110},
        {"point": "DL-PT-301", "chainage_m": C_L, "elevation_m": 10}],
    "temperature_points": [{"point": "MV-TT-101", "chainage_m": 0}, {"point": "DL-TT-301", "chainage_m": C_L}],
    "tanks": [{"id": "DL-T-301", "level_point": "DL-LT-301", "temperature_point": "DL-TT-302",
               "strapping_table": {"level_unit": "m", "volume_unit": "m3",
                                   "rows": [[h, round(area * h, 1)] for h in (0, 0.5, 2, 6, 10, 14, 16)]}}],
    "landmarks": [{"name": "Morvath field station", "chainage_m": 0},
                  {"name": "Block valve M-4 (Guthra summit)", "chainage_m": 30000},
                  {"name": "Eskeld injection", "chainage_m": 40000},
                  {"name": "Drumlay receiver", "chainage_m": C_L}],
    "nominal_flow": q(1300, "m3/h")}, 12, 43200)
# The injection meter is a mass meter in t/h.
c_points["EK-FT-201"]["unit"] = "t/h"
c_points["EK-FT-201"]["range"] = [0, 450]
write("morvath-site.json", site("Morvath crude trunk (invented evaluation line)",
      {"morvath_crude": {"model": "crude_oil", "base_density": q(868, "kg/m3")}}, c_points, c_seg))
c_instr = {}
for i, pid in enumerate(c_points):
    k = c_points[pid]["kind"]
    c_instr[pid] = {"quantum": {"flow": 0.01, "pressure": 0.001, "temperature": 0.01, "level": 0.0001}[k],
                    "phase_s": round(0.07 * i, 2)}
write("morvath-scenario.json", {
    "format": "holdfast-scenario/1",
    "_comment": "Invented base scenario of the Morvath crude trunk: pump on its curve, the Eskeld injection off (the batch runs it 10:00-14:00), the Drumlay tank sending on what arrives under level control.",
    "name": "Morvath evaluation base", "segment": "MV-1", "start": "2026-03-02T00:00:00Z",
    "duration_s": 43200, "seed": 1, "time_step_s": 1.0,
    "upstream": {"type": "pump", "suction_head_m": 55, "shutoff_head_m": 840, "rated_flow": q(1300, "m3/h"),
                 "rated_head_m": 665},
    "downstream": {"type": "tank", "tank": "DL-T-301", "initial_level_m": 8.0, "base_elevation_m": 10,
                   "outflow": q(1300, "m3/h"),
                   "level_control": {"setpoint_m": 8.0, "gain_per_m": q(300, "m3/h")},
                   "contents_temperature": "mixed",
                   "valve": {"pressure_drop": q(1.0, "bar"), "at_flow": q(1300, "m3/h")}},
    "laterals": {"EK-FT-201": {"flow": q(0, "t/h")}},
    "temperature": {"inlet": q(24, "degC"), "swing": {"amplitude_k": 1.0, "period_s": 86400, "phase_s": 36000}},
    "instrument_defaults": {"sample_period_s": 1, "jitter_s": 0.015, "latency_s": 0.3, "latency_spread_s": 0.5},
    "instruments": c_instr})
c_ops = [
    {"at_s": 36000, "action": "setpoint", "target": "EK-FT-201", "flow": q(170, "t/h"), "ramp_s": 180},
    {"at_s": 50400, "action": "setpoint", "target": "EK-FT-201", "flow": q(0, "t/h"), "ramp_s": 180}]
c_ch = [8000, 25000, 45000, 65000, 84000]
write("morvath-batch.json", batch("Morvath crude trunk", "morvath-scenario.json", [0.5, 1, 2, 5], c_ch,
      c_ops, 7, 36000, 36000, 1.5, ["standard", "rough"]))

# ---------------------------------------------------------------------------
# d. HOLD-OUT: Pennick diesel spur, short and small, a mid-line injection,
#    2 s sampling. Not to be looked at while designing (holdout/README.md).
# ---------------------------------------------------------------------------
D_L = 12000
d_points = {
    "PN-FT-101": flow_pt("m3/h", [0, 250]),
    "PN-PT-101": p_pt(), "PN-TT-101": t_pt(),
    "HX-FT-201": flow_pt("m3/h", [0, 80]),
    "HX-PT-201": p_pt(), "HX-TT-201": t_pt(),
    "GL-FT-301": flow_pt("m3/h", [0, 250]),
    "GL-PT-301": p_pt(), "GL-TT-301": t_pt(),
}
d_seg = seg_common({
    "id": "PN-1", "name": "Pennick depot to Gallet terminal (invented)",
    "fluid": "pennick_diesel", "reach_length_m": 250,
    "sections": [section(D_L, 168.3, 4.8)],
    "elevation_profile": [{"chainage_m": 0, "elevation_m": 5}, {"chainage_m": 4000, "elevation_m": 30},
                          {"chainage_m": D_L, "elevation_m": 15}],
    "meters": [
        {"point": "PN-FT-101", "role": "inlet", "type": "line_volume", "chainage_m": 0,
         "pressure_point": "PN-PT-101", "temperature_point": "PN-TT-101"},
        {"point": "HX-FT-201", "role": "injection", "type": "line_volume", "chainage_m": 5000,
         "pressure_point": "HX-PT-201", "temperature_point": "HX-TT-201"},
        {"point": "GL-FT-301", "role": "outlet", "type": "line_volume", "chainage_m": D_L,
         "pressure_point": "GL-PT-301", "temperature_point": "GL-TT-301"}],
    "pressure_points": [
        {"point": "PN-PT-101", "chainage_m": 0, "elevation_m": 5},
        {"point": "HX-PT-201", "chainage_m": 5000, "elevation_m": 28},
        {"point": "GL-PT-301", "chainage_m": D_L, "elevation_m": 15}],
    "temperature_points": [{"point": "PN-TT-101", "chainage_m": 0}, {"point": "HX-TT-201", "chainage_m": 5000},
                           {"point": "GL-TT-301", "chainage_m": D_L}],
    "landmarks": [{"name": "Pennick depot", "chainage_m": 0}, {"name": "Hexley injection", "chainage_m": 5000},
                  {"name": "Gallet terminal", "chainage_m": D_L}],
    "nominal_flow": q(120, "m3/h")}, 13, 21600)
write("holdout/pennick-site.json", site("Pennick diesel spur (invented hold-out line)",
      {"pennick_diesel": {"model": "refined_product", "product": "fuel_oil", "base_density": q(838, "kg/m3")}},
      d_points, d_seg))
d_instr = {pid: {"quantum": 0.01 if d_points[pid]["kind"] == "flow" else (0.001 if d_points[pid]["kind"] == "pressure" else 0.01),
                 "phase_s": round(0.13 * i, 2)} for i, pid in enumerate(d_points)}
write("holdout/pennick-scenario.json", {
    "format": "holdfast-scenario/1",
    "_comment": "Invented base scenario of the Pennick hold-out line: pump on its curve, the Hexley injection off (the batch runs it twice a day), a valve into the Gallet terminal tank outside the segment; 2 s sampling.",
    "name": "Pennick evaluation base", "segment": "PN-1", "start": "2026-07-06T00:00:00Z",
    "duration_s": 43200, "seed": 1, "time_step_s": 1.0,
    "upstream": {"type": "pump", "suction_head_m": 12, "shutoff_head_m": 360, "rated_flow": q(120, "m3/h"),
                 "rated_head_m": 285},
    "downstream": {"type": "reservoir", "head_m": 22,
                   "valve": {"pressure_drop": q(2.0, "bar"), "at_flow": q(130, "m3/h")}},
    "laterals": {"HX-FT-201": {"flow": q(0, "m3/h")}},
    "temperature": {"inlet": q(18, "degC"), "swing": {"amplitude_k": 2.0, "period_s": 86400, "phase_s": 36000}},
    "instrument_defaults": {"sample_period_s": 2, "jitter_s": 0.02, "latency_s": 0.4, "latency_spread_s": 1.0},
    "instruments": d_instr})
d_ops = [
    {"at_s": 21600, "action": "setpoint", "target": "HX-FT-201", "flow": q(35, "m3/h"), "ramp_s": 60},
    {"at_s": 32400, "action": "setpoint", "target": "HX-FT-201", "flow": q(0, "m3/h"), "ramp_s": 60},
    {"at_s": 57600, "action": "setpoint", "target": "HX-FT-201", "flow": q(35, "m3/h"), "ramp_s": 60},
    {"at_s": 68400, "action": "setpoint", "target": "HX-FT-201", "flow": q(0, "m3/h"), "ramp_s": 60}]
write("holdout/pennick-batch.json", batch("Pennick diesel spur (hold-out)", "pennick-scenario.json", [0.5, 1, 2, 5],
      [1500, 4500, 8000, 10500], d_ops, 7, 72000, 32400, 1.0, ["standard", "rough"]))
