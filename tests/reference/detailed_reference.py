#!/usr/bin/env python3
"""Independent reference for crankcharge's `detailed` fidelity.

Integrates the detailed equations of ONE shipped scenario with scipy's implicit Radau method at
tight tolerances and writes the trace on the product's 0.1-s grid, for tests/fidelity.rs to hold
the Rust engine (its own integrator, Radau5 from a Rust crate since it left explicit Dopri5, and
its own event location) against.

Scenario: profiles/setups/demo.ron with profiles/cranking/steady.ron, `jitter.enabled = false`
(no cadence wander, no per-turn ripple, no rests), 3 s from rest: crank spin-up, UVLO release,
soft-start, duty saturation (dropout) while the operator brings the crank up, then CC regulation.

The equations are written here from the physics (DESIGN.md §2) and the product's stated model
choices (read in the Rust sources, not called). Nothing in this file imports or runs the product.

Re-run (from the repository root):

    python3 tests/reference/detailed_reference.py

It writes tests/reference/demo_detailed_3s.csv and tests/reference/demo_detailed_3s_events.csv.
Needs Python 3 with numpy and scipy; takes a few seconds and writes the same bytes each run.

Parameters are read from the two RON files by a small regex reader, number by key inside the
named block (see `SETUP_FIELDS` / `PROFILE_FIELDS` below for every field read and the default used
when the file leaves a field out; those defaults are the product's documented serde defaults).
Model constants that live in the Rust sources, not in the files, are listed in `MODEL_CONSTANTS`
with the file they come from; the script checks them against those sources and stops if one has
changed, so the fixture is never regenerated against a silently different model.
"""

import argparse
import csv
import math
import pathlib
import re
import sys
import time

import numpy as np
from scipy.integrate import solve_ivp
from scipy.interpolate import PchipInterpolator
from scipy.optimize import brentq

ROOT = pathlib.Path(__file__).resolve().parents[2]
SETUP_FILE = ROOT / "profiles/setups/demo.ron"
PROFILE_FILE = ROOT / "profiles/cranking/steady.ron"
OUT_TRACE = ROOT / "tests/reference/demo_detailed_3s.csv"
OUT_EVENTS = ROOT / "tests/reference/demo_detailed_3s_events.csv"
DURATION_S = 3.0
RTOL = 1e-9
ATOL = 1e-11

# ---------------------------------------------------------------------------------------------
# Model constants that are not in the scenario files: (value, Rust file, regex capturing it).
# ---------------------------------------------------------------------------------------------
NUM = r"([-+]?[0-9][0-9_]*\.?[0-9]*(?:[eE][-+]?[0-9]+)?)"
MODEL_CONSTANTS = {
    # Copper temperature coefficient at 20 °C (Dellinger 1911; REFERENCES.md §4).
    "copper_alpha_per_k": (0.00393, "src/model/generator.rs", r"COPPER_ALPHA_PER_K: f64 = " + NUM),
    # Brush drop smoothing current V_b·tanh(i/i_s), A.
    "brush_smooth_a": (0.2, "src/model/generator.rs", r"BRUSH_SMOOTH_A: f64 = " + NUM),
    # Hysteresis (iron-loss) drag smoothing τ_h·tanh(ω/ω_s), rad/s.
    "iron_smooth_rad_s": (0.5, "src/model/generator.rs", r"IRON_SMOOTH_RAD_S: f64 = " + NUM),
    # Temperature at which the back-EMF constant is given, °C.
    "ke_reference_c": (20.0, "src/model/generator.rs", r"KE_REFERENCE_C: f64 = " + NUM),
    # The core-loss current P_core/V_in is held at P_core/this below it, V.
    "core_loss_min_v": (1.0, "src/model/converter.rs", r"CORE_LOSS_MIN_V: f64 = " + NUM),
    # Coulomb friction at the shaft τ_c·tanh(ω/ω_s), rad/s.
    "friction_smooth_rad_s": (0.5, "src/model/drive.rs", r"FRICTION_SMOOTH_RAD_S: f64 = " + NUM),
    # Crank bearing friction τ_b·tanh(ω_c/ω_s), N·m and rad/s.
    "crank_bearing_n_m": (0.05, "src/simulate/plant.rs", r"CRANK_BEARING_N_M: f64 = " + NUM),
    "crank_bearing_smooth_rad_s": (0.5, "src/simulate/plant.rs",
                                   r"CRANK_BEARING_SMOOTH: f64 = " + NUM),
    # Operator power cap P/ω applied only above this crank speed, rad/s.
    "power_cap_min_omega": (0.2, "src/model/operator.rs", r"POWER_CAP_MIN_OMEGA: f64 = " + NUM),
    # The charger wakes only with its input this far above the battery, and sleeps (locks out)
    # when the input falls below the battery, V.
    "sleep_hysteresis_v": (0.1, "src/simulate/transitions.rs", r"SLEEP_HYSTERESIS_V: f64 = " + NUM),
}
# The built-in NMC cell OCV table (V against SOC) is data, not a model choice: it is read from
# src/model/battery/li_ion.rs (`SOC_KNOTS`, `OCV_NMC`) by `read_ocv_table`.
# Controller design rule of ControllerGains::design (src/model/controller.rs): current-loop
# crossover f_sw/30 against the inductor, voltage loop a decade slower against the battery's
# slope resistance, kp_v = 0.1/r, ki_i = kp_i·ω_ci/4, back-calculation time 4/ω_cv.
CURRENT_LOOP_FRACTION_OF_FSW = 30.0


def check_constants_against_sources():
    """Stops if a constant copied above no longer matches the Rust source."""
    bad = []
    for name, (value, rel, pattern) in MODEL_CONSTANTS.items():
        text = (ROOT / rel).read_text(encoding="utf-8")
        m = re.search(pattern, text)
        if not m or abs(float(m.group(1).replace("_", "")) - value) > 1e-15 * max(1.0, abs(value)):
            bad.append(f"{name}: {rel} no longer says {value}")
    if bad:
        sys.exit("model constants changed; update this script first:\n  " + "\n  ".join(bad))


def read_ocv_table():
    """(SOC knots, NMC cell OCV) from the product's built-in table."""
    li = (ROOT / "src/model/battery/li_ion.rs").read_text(encoding="utf-8")
    tables = []
    for name in ("SOC_KNOTS", "OCV_NMC"):
        m = re.search(name + r": \[f64; \d+\] = \[([^\]]*)\]", li)
        if not m:
            sys.exit(f"table {name} not found in src/model/battery/li_ion.rs")
        tables.append([float(v) for v in m.group(1).split(",") if v.strip()])
    if len(tables[0]) != len(tables[1]):
        sys.exit("SOC_KNOTS and OCV_NMC differ in length")
    return tables


# ---------------------------------------------------------------------------------------------
# A small RON reader: numbers, words and booleans by key inside a named block.
# ---------------------------------------------------------------------------------------------
def strip_comments(text):
    return re.sub(r"//[^\n]*", "", text)


def block(text, name):
    """Inner text of `name: ( ... )` or `name: [ ... ]` (brackets balanced)."""
    m = re.search(r"\b" + re.escape(name) + r"\s*:\s*([(\[])", text)
    if not m:
        raise KeyError(f"no block `{name}`")
    open_c = m.group(1)
    close_c = ")" if open_c == "(" else "]"
    depth, i = 0, m.end(1) - 1
    for j in range(i, len(text)):
        if text[j] in "([":
            depth += 1
        elif text[j] in ")]":
            depth -= 1
            if depth == 0:
                assert text[j] == close_c
                return text[i + 1:j]
    raise ValueError(f"unbalanced block `{name}`")


def top_level(text):
    """The text with every nested bracketed group blanked out (keys of this level only)."""
    out, depth = [], 0
    for ch in text:
        if ch in "([":
            depth += 1
        if depth == 0:
            out.append(ch)
        if ch in ")]":
            depth -= 1
    return "".join(out)


def entries(list_text):
    """The `( ... )` items of a RON list."""
    items, depth, start = [], 0, None
    for j, ch in enumerate(list_text):
        if ch == "(":
            if depth == 0:
                start = j + 1
            depth += 1
        elif ch == ")":
            depth -= 1
            if depth == 0:
                items.append(list_text[start:j])
    return items


def raw(text, key):
    m = re.search(r"\b" + re.escape(key) + r"\s*:\s*([^,\s)\]]+)", top_level(text))
    return m.group(1) if m else None


def num(text, key, default=None):
    v = raw(text, key)
    if v is None:
        if default is None:
            raise KeyError(f"missing number `{key}`")
        return float(default)
    return float(v.replace("_", ""))


def word(text, key, default=None):
    v = raw(text, key)
    if v is None:
        if default is None:
            raise KeyError(f"missing word `{key}`")
        return default
    return v


# Every field read, with the default used when the file leaves it out (None: required; a text
# in parentheses: a word, or a default that depends on other fields).
SETUP_FIELDS = {
    "": {"ambient_c": None},
    "drive": {"crank_inertia_kg_m2": None, "flywheel_inertia_kg_m2": None,
              "coulomb_friction_n_m": 0.0, "viscous_friction_n_m_s": 0.0,
              "freewheel": "false", "stages[].ratio": None, "stages[].efficiency": None},
    "generator": {"back_emf_v_per_krpm": None, "resistance_ohm": None, "inductance_h": 1e-3,
                  "inertia_kg_m2": None, "brush_drop_v": 0.0,
                  "hysteresis_loss_w_per_krpm": 0.0, "eddy_loss_w_per_krpm2": 0.0,
                  "back_emf_tempco_pct_per_k": -0.2, "cogging_torque_n_m": 0.0,
                  "winding_heat_capacity_j_per_k": 60.0, "winding_to_ambient_w_per_k": 0.8},
    "diode": {"kind": "(word)", "points[].current_a": None, "points[].forward_v": None,
              "series_resistance_ohm": 0.0},
    "converter": {"topology": "(word)", "charge_current_a": 1.0, "max_duty": 0.95,
                  "switch_drop_v": 0.0, "switch_resistance_ohm": 0.0,
                  "catch_diode_drop_v": 0.45, "inductor_resistance_ohm": 0.0,
                  "inductance_h": 47e-6, "switching_frequency_hz": 150e3,
                  "switch_transition_s": 0.0, "quiescent_current_a": 0.0,
                  "gate_charge_c": 0.0, "core_loss_w": 0.0, "uvlo_on_v": 0.0,
                  "uvlo_off_v": 0.0, "soft_start_s": 0.05, "input_overvoltage_v": 40.0,
                  "input_capacitance_f": 470e-6, "output_capacitance_f": 100e-6,
                  "cv_setpoint_v": "(battery limit)", "termination_current_a": "(C/10)"},
    "battery": {"chemistry": "(word)", "cells_series": None, "cells_parallel": 1.0,
                "capacity_ah": None, "soc_start": None, "cell_r0_ohm": 0.035,
                "cell_r1_ohm": 0.02, "cell_c1_f": 2000.0, "resistance_activation_k": 2500.0,
                "coulombic_efficiency": 0.998, "charge_v_per_cell": 4.20,  # NMC default
                "mass_kg": None,
                "specific_heat_j_per_kg_k": 1000.0, "surface_area_m2": None,
                "heat_transfer_w_per_m2_k": 7.0, "temp_start_c": "(ambient)"},
    "battery.charge_window": {"min_c": 0.0, "cool_c": 10.0, "warm_c": 45.0, "max_c": 60.0},
}
PROFILE_FIELDS = {
    "": {"cadence_scale": 1.0, "segments[].duration_s": None, "segments[].cadence_rpm": None,
         "segments[].end_cadence_rpm": "(same as cadence_rpm)"},
    "operator": {"peak_torque_n_m": 30.0, "max_cadence_rpm": 220.0, "critical_power_w": 65.0,
                 "w_prime_j": 9000.0, "peak_power_w": 140.0, "tracking_gain_n_m_per_rpm": 0.25,
                 "tracking_time_s": 1.5, "spin_up_s": 2.0},
    # jitter: `enabled` is overridden to false, so no other jitter field is used.
}


def section(text, path):
    t = text
    for part in filter(None, path.split(".")):
        t = block(t, part)
    return t


def read_setup(path):
    text = strip_comments(path.read_text(encoding="utf-8"))
    top = text[text.index("(") + 1:text.rindex(")")]
    P = {}
    for sec, fields in SETUP_FIELDS.items():
        if sec == "battery.charge_window":
            continue  # optional block, read below
        body = section(top, sec)
        for key, default in fields.items():
            if "[]" in key or isinstance(default, str):
                continue
            P[(sec + "." if sec else "") + key] = num(body, key, default)
    drive = block(top, "drive")
    stages = entries(block(drive, "stages"))
    P["drive.ratio"] = math.prod(num(s, "ratio") for s in stages)
    P["drive.efficiency"] = math.prod(num(s, "efficiency") for s in stages)
    P["drive.freewheel"] = word(drive, "freewheel", "false") == "true"
    diode = block(top, "diode")
    P["diode.kind"] = word(diode, "kind")
    P["diode.points"] = [(num(e, "current_a"), num(e, "forward_v"))
                         for e in entries(block(diode, "points"))]
    conv = block(top, "converter")
    P["converter.topology"] = word(conv, "topology")
    P["converter.overvoltage_shutdown"] = word(conv, "overvoltage_shutdown", "false") == "true"
    P["converter.cv_setpoint_v"] = num(conv, "cv_setpoint_v", float("nan"))
    P["converter.termination_current_a"] = num(conv, "termination_current_a", float("nan"))
    bat = block(top, "battery")
    P["battery.chemistry"] = word(bat, "chemistry")
    P["battery.temp_start_c"] = num(bat, "temp_start_c", float("nan"))
    try:
        window = block(bat, "charge_window")
    except KeyError:
        window = ""
    for key, default in SETUP_FIELDS["battery.charge_window"].items():
        P["battery.charge_window." + key] = num(window, key, default)
    return P


def read_profile(path):
    text = strip_comments(path.read_text(encoding="utf-8"))
    top = text[text.index("(") + 1:text.rindex(")")]
    P = {"cadence_scale": num(top, "cadence_scale", 1.0)}
    segs = []
    for e in entries(block(top, "segments")):
        c = num(e, "cadence_rpm")
        segs.append((num(e, "duration_s"), c, num(e, "end_cadence_rpm", c)))
    P["segments"] = segs
    op = block(top, "operator")
    for key, default in PROFILE_FIELDS["operator"].items():
        P["operator." + key] = num(op, key, default)
    return P


# ---------------------------------------------------------------------------------------------
# Model
# ---------------------------------------------------------------------------------------------
RPM = 2.0 * math.pi / 60.0  # rad/s per rpm


def shockley_fit(p1, p2, rs):
    """(I_s, n·V_T) with V = n·V_T·ln(1 + I/I_s) + I·R_s exact at both datasheet points.

    Eliminating n·V_T leaves one equation in I_s: ln(1 + I2/I_s)/ln(1 + I1/I_s) = u2/u1 with
    u = V − I·R_s; solved by bracketing in log I_s (not the product's fixed-point iteration).
    """
    (i1, v1), (i2, v2) = sorted([p1, p2])
    u1, u2 = v1 - i1 * rs, v2 - i2 * rs
    ratio = u2 / u1

    def g(log_is):
        s = math.exp(log_is)
        return math.log1p(i2 / s) / math.log1p(i1 / s) - ratio

    log_is = brentq(g, math.log(1e-30), math.log(i1 * 1e3), xtol=1e-14, rtol=1e-15, maxiter=500)
    i_s = math.exp(log_is)
    return i_s, u1 / math.log1p(i1 / i_s)


class Model:
    # Python state layout (the crank and shaft are rigidly coupled: ω_gen = N·ω_crank).
    W_C, OP_I, W_PRIME, SOC, V_RC, T_BAT, T_WIND, SOFT, I_A, V_IN, I_L, V_O, CTRL_V, CTRL_I = \
        range(14)
    N = 14

    def __init__(self, S, Pr):
        c = {k: v[0] for k, v in MODEL_CONSTANTS.items()}
        self.c = c
        assert S["converter.topology"] == "buck", "this reference models the buck charger only"
        assert S["battery.chemistry"] == "nmc", "this reference carries the NMC table only"
        assert S["diode.kind"] == "shockley" and len(S["diode.points"]) == 2
        assert not S["drive.freewheel"], "the freewheel clutch is not modelled here"
        assert not S["converter.overvoltage_shutdown"]
        self.amb = S["ambient_c"]
        # Drive: total ratio and forward efficiency, generator-side inertia, friction.
        self.n = S["drive.ratio"]
        self.eta = S["drive.efficiency"]
        self.jc = S["drive.crank_inertia_kg_m2"]
        self.js = S["generator.inertia_kg_m2"] + S["drive.flywheel_inertia_kg_m2"]
        self.tau_c = S["drive.coulomb_friction_n_m"]
        self.b = S["drive.viscous_friction_n_m_s"]
        # PMDC generator: k_e from V/krpm to V·s/rad (= N·m/A).
        self.ke = S["generator.back_emf_v_per_krpm"] / (1000.0 * RPM)
        self.r20 = S["generator.resistance_ohm"]
        self.la = max(S["generator.inductance_h"], 1e-6)
        self.vb = S["generator.brush_drop_v"]
        # Iron loss P = k_h·(n/1000 rpm) + k_e·(n/1000 rpm)² (hysteresis ∝ f, eddy ∝ f²) as a drag
        # torque P/ω; magnets: k_e(T) = k_e·(1 + c·(T − 20 °C)/100) with the winding's T.
        self.k_hyst = S["generator.hysteresis_loss_w_per_krpm"]
        self.k_eddy = S["generator.eddy_loss_w_per_krpm2"]
        self.ke_tc = S["generator.back_emf_tempco_pct_per_k"] / 100.0
        assert S["generator.cogging_torque_n_m"] == 0.0, "cogging is not modelled here"
        self.cw = S["generator.winding_heat_capacity_j_per_k"]
        self.gw = S["generator.winding_to_ambient_w_per_k"]
        # Protection diode from its two datasheet points.
        self.rs = S["diode.series_resistance_ohm"]
        self.i_s, self.n_vt = shockley_fit(*S["diode.points"], self.rs)
        # Buck converter.
        k = "converter."
        self.icc = S[k + "charge_current_a"]
        self.dmax = S[k + "max_duty"]
        self.vsw = S[k + "switch_drop_v"]
        self.ron = S[k + "switch_resistance_ohm"]
        self.vd = S[k + "catch_diode_drop_v"]
        self.rl = S[k + "inductor_resistance_ohm"]
        self.lb = S[k + "inductance_h"]
        self.fs = S[k + "switching_frequency_hz"]
        self.ttr = S[k + "switch_transition_s"]
        # The controller's quiescent draw plus the gate driver's Q_g·f_sw (one switch), and the
        # inductor's core loss taken from the input while the buck switches.
        self.iq = S[k + "quiescent_current_a"] + S[k + "gate_charge_c"] * S[k + "switching_frequency_hz"]
        self.p_core = S[k + "core_loss_w"]
        self.uvlo_on = S[k + "uvlo_on_v"]
        self.uvlo_off = S[k + "uvlo_off_v"]
        self.t_soft = S[k + "soft_start_s"]
        self.v_ov = S[k + "input_overvoltage_v"]
        self.cin = S[k + "input_capacitance_f"]
        self.co = S[k + "output_capacitance_f"]
        # Li-ion pack (Thevenin, Arrhenius resistances, N_s × N_p).
        k = "battery."
        self.ns = S[k + "cells_series"]
        self.np_ = S[k + "cells_parallel"]
        self.cap_as = S[k + "capacity_ah"] * 3600.0
        self.soc0 = S[k + "soc_start"]
        self.r0c = S[k + "cell_r0_ohm"]
        self.r1c = S[k + "cell_r1_ohm"]
        self.c1c = S[k + "cell_c1_f"]
        self.ea = S[k + "resistance_activation_k"]
        self.eta_c = S[k + "coulombic_efficiency"]
        self.mcp = S[k + "mass_kg"] * S[k + "specific_heat_j_per_kg_k"]
        self.ha = S[k + "heat_transfer_w_per_m2_k"] * S[k + "surface_area_m2"]
        t0 = S[k + "temp_start_c"]
        self.tb0 = self.amb if math.isnan(t0) else t0
        self.window = {w: S["battery.charge_window." + w] for w in ("min_c", "cool_c", "warm_c",
                                                                    "max_c")}
        self.soc_knots, self.ocv_table = read_ocv_table()
        self.ocv_cell = PchipInterpolator(self.soc_knots, self.ocv_table)
        cv = S["converter.cv_setpoint_v"]
        self.v_set = self.ns * S[k + "charge_v_per_cell"] if math.isnan(cv) else cv
        it = S["converter.termination_current_a"]
        self.i_term = self.cap_as / 3600.0 / 10.0 if math.isnan(it) else it
        # Operator.
        k = "operator."
        self.tau0 = Pr[k + "peak_torque_n_m"]
        self.w_max = Pr[k + "max_cadence_rpm"] * RPM
        self.cp = Pr[k + "critical_power_w"]
        self.w0 = Pr[k + "w_prime_j"]
        self.p_peak = max(Pr[k + "peak_power_w"], self.cp)
        self.kp_op = Pr[k + "tracking_gain_n_m_per_rpm"] / RPM
        self.ti_op = Pr[k + "tracking_time_s"]
        self.t_spin = Pr[k + "spin_up_s"]
        self.scale = Pr["cadence_scale"]
        self.segments = []
        t = 0.0
        for dur, a, b in Pr["segments"]:
            self.segments.append((t, t + dur, a, b))
            t += dur
        # Controller gains (the design rule of the product, recomputed here).
        r_slope = self.pack_r(self.tb0)[0]
        v_nom = max(self.uvlo_on, self.ns * S["battery.charge_v_per_cell"] + 2.0)
        wci = 2.0 * math.pi * self.fs / CURRENT_LOOP_FRACTION_OF_FSW
        self.kp_i = wci * self.lb / max(v_nom, 1.0)
        self.ki_i = self.kp_i * wci / 4.0
        wcv = wci / 10.0
        r = max(r_slope, 1e-3)
        self.kp_v = 0.1 / r
        self.ki_v = wcv / r
        self.t_aw = 4.0 / wcv

    # --- parts -----------------------------------------------------------------------------
    def pack_r(self, temp_c):
        f = math.exp(self.ea * (1.0 / (max(temp_c, -60.0) + 273.15) - 1.0 / 298.15))
        k = self.ns / self.np_
        return self.r0c * f * k, max(self.r1c * f * k, 1e-9), self.c1c / k

    def ocv(self, soc):
        return self.ns * float(self.ocv_cell(min(max(soc, 0.0), 1.0)))

    def diode_v(self, i):
        i = max(i, 0.0)
        return self.n_vt * math.log1p(i / self.i_s) + i * self.rs

    def planned(self, t):
        """Planned target cadence, rpm, and its slope, rpm/s."""
        for (a, b, r0, r1) in self.segments:
            if t < b:
                break
        else:
            a, b, r0, r1 = self.segments[-1]
        u = min(max((t - a) / max(b - a, 1e-12), 0.0), 1.0)
        rpm = r0 + (r1 - r0) * u
        if rpm <= 0.0:
            return 0.0, 0.0
        slope = (r1 - r0) / (b - a) if t < b else 0.0
        return rpm * self.scale, slope * self.scale

    # --- the whole chain ---------------------------------------------------------------------
    def evaluate(self, t, y, enabled, soft_done):
        """All algebraic quantities and the state rates at (t, y) in the given mode."""
        wc = y[self.W_C]
        wg = self.n * wc
        soc, v_rc, tb, tw = y[self.SOC], y[self.V_RC], y[self.T_BAT], y[self.T_WIND]
        i_raw, v_in, il_raw, v_o = y[self.I_A], y[self.V_IN], y[self.I_L], y[self.V_O]

        # Operator target with the spin-up ramp from rest.
        planned, slope_rpm = self.planned(t)
        spin = 1.0 if self.t_spin <= 0.0 else min(max(t / self.t_spin, 0.0), 1.0)
        target_rpm = planned * spin
        cranking = planned > 0.0

        # Generator, protection diode, armature inductance: L·di/dt = E − i·R(T) − V_b − V_D − v_in.
        ke = max(self.ke * (1.0 + self.ke_tc * (tw - self.c["ke_reference_c"])), 0.0)
        emf = ke * wg
        r_w = self.r20 * (1.0 + self.c["copper_alpha_per_k"] * (tw - 20.0))
        i_a = max(i_raw, 0.0)
        brush = self.vb * math.tanh(i_a / self.c["brush_smooth_a"]) if self.vb else 0.0
        push = emf - i_a * r_w - brush - self.diode_v(i_a) - v_in
        di_a = 0.0 if (i_raw <= 0.0 and push <= 0.0) else push / self.la

        # Battery terminal: v_o = OCV + v_RC + i·R0.
        r0, r1, c1 = self.pack_r(tb)
        rest = self.ocv(soc) + v_rc
        ib = (v_o - rest) / r0

        # Controller (only when enabled): outer voltage loop → current reference, inner current
        # loop → duty with feed-forward; back-calculation anti-windup on both integrators.
        duty, i_ref, cv_active, saturated, d_cmd = 0.0, 0.0, False, False, 0.0
        rate_v = rate_i = 0.0
        if enabled:
            ramp = 1.0 if soft_done else min(max(y[self.SOFT], 0.0), 1.0)
            e_v = self.v_set - v_o
            i_v = y[self.CTRL_V] + self.kp_v * e_v
            i_v_sat = min(max(i_v, 0.0), self.icc)
            i_ref = ramp * min(self.icc, max(i_v, 0.0))
            e_i = i_ref - il_raw
            den = v_in - self.vsw + self.vd
            d_ff = min(max((v_o + self.vd) / den, 0.0), self.dmax) if den > 0.0 else self.dmax
            d_cmd = d_ff + self.kp_i * e_i + y[self.CTRL_I]
            duty = min(max(d_cmd, 0.0), self.dmax)
            cv_active = i_v < self.icc
            saturated = d_cmd >= self.dmax and i_ref > 0.0
            rate_v = self.ki_v * e_v + (i_v_sat - i_v) / self.t_aw
            rate_i = self.ki_i * e_i + (duty - d_cmd) / self.t_aw

        # Averaged asynchronous buck, full order: the catch diode conducts for d2 ≤ 1 − d
        # (d2 < 1 − d is discontinuous conduction; the inductor current cannot reverse).
        il = max(il_raw, 0.0)
        a = v_in - self.vsw - il * self.ron - v_o
        bv = v_o + self.vd
        period = 1.0 / self.fs
        dcm = False
        if duty > 0.0 and a > 0.0:
            d2 = 2.0 * self.lb * il / (duty * period * a) - duty
            if d2 < 1.0 - duty:
                d2, dcm = max(d2, 0.0), True
            else:
                d2 = 1.0 - duty
        elif il > 0.0:
            d2 = 1.0 - duty
        else:
            d2 = 0.0
        di_l = (duty * a - d2 * bv - il * self.rl) / self.lb
        if il_raw <= 0.0 and di_l < 0.0:
            di_l = 0.0
        if duty > 0.0:
            share = duty / (duty + d2) if duty + d2 > 0.0 else 1.0
            i_in = (share * il + self.iq + 0.5 * il * self.ttr * self.fs
                    + self.p_core / max(v_in, self.c["core_loss_min_v"]))
        else:
            i_in = 0.0

        # Mechanics: operator torque = clamp(PI + feed-forward, 0, envelope).
        tau_em = ke * i_a
        tau_fric = self.tau_c * math.tanh(wg / self.c["friction_smooth_rad_s"]) + self.b * wg
        w1 = 1000.0 * RPM
        tau_iron = (self.k_hyst / w1 * math.tanh(wg / self.c["iron_smooth_rad_s"])
                    + self.k_eddy * wg / (w1 * w1))
        bearing = self.c["crank_bearing_n_m"] * math.tanh(wc / self.c["crank_bearing_smooth_rad_s"])
        w_t = target_rpm * RPM
        w_prime = y[self.W_PRIME]
        if cranking:
            j_fwd = self.jc + self.n * self.n * self.js / self.eta
            spin_slope = planned / self.t_spin if spin < 1.0 else 0.0
            ff = j_fwd * (slope_rpm * spin + spin_slope) * RPM
            cmd = self.kp_op * (w_t - wc) + y[self.OP_I] + ff
            fv = self.tau0 * (1.0 - max(wc, 0.0) / self.w_max)
            frac = min(max(w_prime / self.w0, 0.0), 1.0) if self.w0 > 0 else 0.0
            p_cap = self.cp + (self.p_peak - self.cp) * frac
            env = max(min(fv, p_cap / wc if wc > self.c["power_cap_min_omega"] else math.inf), 0.0)
            tau_op = min(max(cmd, 0.0), env)
            d_op = self.kp_op / self.ti_op * (w_t - wc) + (tau_op - cmd) / self.ti_op
        else:
            tau_op, cmd = 0.0, 0.0
            d_op = -y[self.OP_I] / self.ti_op
        # Rigid belt: J_c·ω̇_c = τ_op − τ_bearing − τ_belt and J_s·N·ω̇_c = τ_shaft − τ_load, with
        # τ_shaft = η·τ_belt/N when power flows forward (τ_belt ≥ 0), τ_belt/(η·N) when it reverses.
        tau_in = tau_op - bearing
        load = tau_em + tau_fric + tau_iron
        acc = (tau_in - self.n / self.eta * load) / (self.jc + self.n ** 2 * self.js / self.eta)
        if tau_in - self.jc * acc < 0.0:
            acc = (tau_in - self.n * self.eta * load) / (self.jc + self.n ** 2 * self.js * self.eta)

        # Operator reserve W′ (Skiba's differential balance).
        p_op = tau_op * wc
        p = max(p_op, 0.0)
        if p > self.cp:
            d_w = -(p - self.cp) if w_prime > 0.0 else 0.0
        else:
            d_w = (self.w0 - w_prime) * (self.cp - p) / self.w0 if self.w0 > 0.0 else 0.0

        # Battery: SOC, RC branch, heat; winding heat.
        eta = self.eta_c if ib > 0.0 else 1.0
        d_soc = (eta * ib if ib > 0.0 else ib) / self.cap_as
        d_rc = ib / c1 - v_rc / (r1 * c1)
        ocv = self.ocv(soc)
        heat = ib * ib * r0 + v_rc * v_rc / r1 + (ocv * (1.0 - eta) * ib if ib > 0.0 else 0.0)
        d_tb = (heat - self.ha * (tb - self.amb)) / self.mcp
        d_tw = (i_a * i_a * r_w - self.gw * (tw - self.amb)) / self.cw
        d_soft = 1.0 / self.t_soft if (enabled and not soft_done and self.t_soft > 0.0) else 0.0

        dy = [0.0] * self.N
        dy[self.W_C] = acc
        dy[self.OP_I] = d_op
        dy[self.W_PRIME] = d_w
        dy[self.SOC] = d_soc
        dy[self.V_RC] = d_rc
        dy[self.T_BAT] = d_tb
        dy[self.T_WIND] = d_tw
        dy[self.SOFT] = d_soft
        dy[self.I_A] = di_a
        dy[self.V_IN] = (i_a - i_in) / self.cin
        dy[self.I_L] = di_l
        dy[self.V_O] = (il - ib) / self.co
        dy[self.CTRL_V] = rate_v
        dy[self.CTRL_I] = rate_i

        if not enabled:
            mode = "lockout"
        elif saturated:
            mode = "dropout"
        elif not soft_done:
            mode = "soft_start"
        else:
            mode = "cv" if cv_active else "cc"
        out = {
            "crank_rpm": wc / RPM,
            "target_rpm": target_rpm,
            "generator_rpm": wg / RPM,
            "emf_v": emf,
            "generator_current_a": i_a,
            "input_v": v_in,
            "duty": duty,
            "output_v": v_o,
            "battery_v": v_o,
            "battery_current_a": ib,
            "soc": soc,
            "battery_temp_c": tb,
            "winding_temp_c": tw,
            "operator_power_w": p_op,
            "operator_torque_n_m": tau_op,
            "mode": mode,
            # For events and checks, not written.
            "_d_cmd": d_cmd,
            "_i_ref": i_ref,
            "_cv_active": cv_active,
            "_dcm": dcm,
        }
        return out, dy

    def initial_state(self):
        y = [0.0] * self.N
        y[self.W_PRIME] = self.w0
        y[self.SOC] = self.soc0
        y[self.T_BAT] = self.tb0
        y[self.T_WIND] = self.amb
        # Output capacitor at the battery's rest voltage; input capacitor empty.
        y[self.V_O] = self.ocv(self.soc0)
        return y


# ---------------------------------------------------------------------------------------------
# Integration in segments between discrete changes
# ---------------------------------------------------------------------------------------------
COLUMNS = ["time_s", "crank_rpm", "target_rpm", "generator_rpm", "emf_v", "generator_current_a",
           "input_v", "duty", "output_v", "battery_v", "battery_current_a", "soc",
           "battery_temp_c", "winding_temp_c", "operator_power_w", "operator_torque_n_m", "mode"]


def run(m, duration, grid_dt, rtol, atol_all, method="Radau", max_step=0.01, stats=None):
    """Integrates `duration` s from rest; (grid rows, events, accepted steps).

    `method` and `max_step` are solve_ivp's (the fixture uses the defaults). If `stats` is a dict,
    the solver's counters summed over the segments are added to it: nfev, njev, nlu, steps and
    solve_s (wall time inside solve_ivp, perf_counter).
    """
    t, y = 0.0, m.initial_state()
    enabled, soft_done = False, m.t_soft <= 0.0
    # Kinks of the planned target: the end of the spin-up ramp and the segment ends.
    time_events = sorted({m.t_spin} | {b for (_, b, _, _) in m.segments} | {duration})
    time_events = [te for te in time_events if 0.0 < te <= duration]
    pieces = []   # (t0, t1, dense solution, enabled, soft_done)
    events = []   # (kind, time)
    n_steps = 0

    while t < duration - 1e-12:
        t_stop = next(te for te in time_events if te > t + 1e-12)
        ev_funcs, ev_names = [], []

        def make(fun, terminal, direction, name):
            fun.terminal, fun.direction = terminal, direction
            ev_funcs.append(fun)
            ev_names.append(name)

        # UVLO with hysteresis, and sleep: the charger needs its input at or above uvlo_on_v and
        # sleep_hysteresis_v above the battery (the output capacitor) plus its switch drop (below
        # V_o + V_sw no duty pushes current) to start; it stops when the input falls below
        # uvlo_off_v or below the battery plus the switch drop.
        hyst = m.c["sleep_hysteresis_v"]
        if not enabled:
            make(lambda tt, yy: yy[m.V_IN] - max(m.uvlo_on, yy[m.V_O] + m.vsw + hyst), True, 1.0,
                 "enable")
        else:
            make(lambda tt, yy: yy[m.V_IN] - max(m.uvlo_off, yy[m.V_O] + m.vsw), True, -1.0,
                 "disable")
            if not soft_done:
                make(lambda tt, yy: yy[m.SOFT] - 1.0, True, 1.0, "soft_start_done")
            # Not mode changes, only reported: the duty command meeting and leaving D_max.
            def excess(tt, yy, e=enabled, s=soft_done):
                return m.evaluate(tt, yy, e, s)[0]["_d_cmd"] - m.dmax

            make(excess, False, 1.0, "dropout_start")
            make(lambda tt, yy: excess(tt, yy), False, -1.0, "dropout_end")

        fun = lambda tt, yy, e=enabled, s=soft_done: m.evaluate(tt, yy, e, s)[1]
        atol = np.full(m.N, atol_all)
        atol[m.W_PRIME] = 1e-7  # J: the reserve sits at 9 kJ
        t_wall = time.perf_counter()
        sol = solve_ivp(fun, (t, t_stop), y, method=method, rtol=rtol, atol=atol,
                        dense_output=True, events=ev_funcs, max_step=max_step)
        if stats is not None:
            stats["solve_s"] = stats.get("solve_s", 0.0) + time.perf_counter() - t_wall
            for key in ("nfev", "njev", "nlu"):
                stats[key] = stats.get(key, 0) + int(getattr(sol, key, 0) or 0)
            stats["steps"] = stats.get("steps", 0) + len(sol.t) - 1
        if sol.status < 0:
            sys.exit(f"solve_ivp failed at t = {sol.t[-1]}: {sol.message}")
        n_steps += len(sol.t) - 1
        t_end = sol.t[-1]
        for name, tes in zip(ev_names, sol.t_events):
            for te in tes:
                if not ev_funcs[ev_names.index(name)].terminal and te > t + 1e-12:
                    events.append((name, float(te)))
        pieces.append((t, t_end, sol.sol, enabled, soft_done))
        # Check every accepted step for mode changes this reference does not model.
        for k in range(len(sol.t)):
            check_unmodelled(m, sol.t[k], sol.y[:, k], enabled, soft_done)
        y = list(sol.y[:, -1])
        if sol.status == 1:
            which = next(i for i, tes in enumerate(sol.t_events)
                         if ev_funcs[i].terminal and len(tes))
            name = ev_names[which]
            y = list(sol.y_events[which][-1])
            events.append((name, float(t_end)))
            if name == "enable":
                enabled = True
                soft_done = m.t_soft <= 0.0
                y[m.SOFT] = 0.0
                y[m.CTRL_V] = 0.0
                y[m.CTRL_I] = 0.0
            elif name == "disable":
                enabled, soft_done = False, False
                y[m.SOFT] = 0.0
            elif name == "soft_start_done":
                soft_done = True
                y[m.SOFT] = 1.0
        elif abs(t_end - m.t_spin) < 1e-12:
            events.append(("spin_up_end", float(t_end)))
        t = t_end

    # Sample the fixed grid; a grid time on a boundary belongs to the piece that ends there.
    rows = []
    k = 0
    while k * grid_dt <= duration + 1e-9:
        tk = min(k * grid_dt, duration)
        piece = next(p for p in pieces if p[0] - 1e-12 <= tk <= p[1] + 1e-12)
        out, _ = m.evaluate(tk, list(piece[2](tk)), piece[3], piece[4])
        out["time_s"] = tk
        rows.append(out)
        k += 1
    return rows, sorted(events, key=lambda e: e[1]), n_steps


def build_model():
    """The demo + steady scenario of the fixture, after checking the copied constants."""
    check_constants_against_sources()
    return Model(read_setup(SETUP_FILE), read_profile(PROFILE_FILE))


def integrate(method="Radau", duration_s=DURATION_S, rtol=RTOL, atol=ATOL, max_step=0.01,
              model=None):
    """For other scripts (tests/reference/timing.py): one integration of the fixture's scenario
    with solve_ivp `method`, nothing written. Returns (grid rows, events, stats) with stats as in
    `run` (nfev, njev, nlu, steps, solve_s). Pass `model` (from `build_model`) to leave reading
    the files out of a timed call."""
    m = model if model is not None else build_model()
    stats = {}
    rows, events, _ = run(m, duration_s, 0.1, rtol, atol, method=method, max_step=max_step,
                          stats=stats)
    return rows, events, stats


def check_unmodelled(m, t, y, enabled, soft_done):
    """Stops if the scenario reaches a mode change this reference leaves out."""
    out, _ = m.evaluate(t, list(y), enabled, soft_done)
    tb = y[m.T_BAT]
    w = m.window
    problems = []
    if not (w["cool_c"] <= tb <= w["warm_c"]):
        problems.append("battery left the standard charge-temperature band")
    if enabled and soft_done and out["_cv_active"] and not (out["_d_cmd"] >= m.dmax) \
            and out["battery_current_a"] < m.i_term:
        problems.append("charge termination would fire")
    if out["input_v"] > m.v_ov:
        problems.append("input over-voltage")
    if not (m.soc_knots[1] <= y[m.SOC] <= m.soc_knots[-2]):
        # Only between the second and the second-to-last knot are both ends of every interval
        # interior knots, where scipy's PCHIP slopes (weighted harmonic mean) equal the product's;
        # the end slopes differ (scipy: three-point shape-preserving; ours: one-sided secant).
        problems.append("SOC outside the interior OCV knots")
    if problems:
        sys.exit(f"t = {t}: " + "; ".join(problems) + " (not modelled by this reference)")


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--duration", type=float, default=DURATION_S)
    ap.add_argument("--trace", type=pathlib.Path, default=OUT_TRACE)
    ap.add_argument("--events", type=pathlib.Path, default=OUT_EVENTS)
    ap.add_argument("--rtol", type=float, default=RTOL, help="convergence checks only")
    ap.add_argument("--atol", type=float, default=ATOL, help="convergence checks only")
    args = ap.parse_args()
    check_constants_against_sources()
    S = read_setup(SETUP_FILE)
    Pr = read_profile(PROFILE_FILE)
    m = Model(S, Pr)
    rows, events, n_steps = run(m, args.duration, 0.1, args.rtol, args.atol)
    with open(args.trace, "w", newline="") as f:
        f.write("# Reference trace of crankcharge's detailed fidelity: demo.ron + steady.ron, "
                "jitter off, written by tests/reference/detailed_reference.py (scipy Radau, "
                f"rtol {args.rtol:g}, atol {args.atol:g}).\n")
        w = csv.writer(f, lineterminator="\n")
        w.writerow(COLUMNS)
        for r in rows:
            w.writerow([r[c] if c == "mode" else f"{r[c]:.10g}" for c in COLUMNS])
    with open(args.events, "w", newline="") as f:
        f.write("# Mode changes and dropout crossings of the same reference run.\n")
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["kind", "time_s"])
        for name, te in events:
            w.writerow([name, f"{te:.10g}"])
    print(f"diode: I_s = {m.i_s:.6e} A, n·V_T = {m.n_vt:.6e} V; "
          f"gains kp_i {m.kp_i:.4g} ki_i {m.ki_i:.4g} kp_v {m.kp_v:.4g} ki_v {m.ki_v:.4g}")
    print(f"{n_steps} Radau steps; events: " + ", ".join(f"{n} {t:.6f}" for n, t in events))
    print(f"wrote {args.trace} and {args.events}")


if __name__ == "__main__":
    main()
