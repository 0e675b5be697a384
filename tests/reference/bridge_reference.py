#!/usr/bin/env python3
"""Switched circuit simulation of a six-diode bridge fed by a three-phase source with series
inductance, for the averaged bridge model of crankcharge's three-phase alternator.

The circuit, simulated instant by instant (no averaging, no formula of the product):

- three balanced sinusoidal EMFs e_k = sqrt(2)*E*sin(w*t - 2*pi*k/3) in star, the star point
  floating;
- each phase through an inductance L (the synchronous inductance) and a small resistance R to
  its bridge leg;
- six diodes, each a piecewise-linear switch: on, a conductance G_ON; off, G_OFF;
- the DC side a constant current sink I_d from the positive rail to the negative one (the
  limit of a large DC inductance), the negative rail the reference node.

Backward Euler with step H; at each step the diode states are iterated until every on diode
carries forward current and every off diode is reverse biased. After the start transient (the
phase currents settle within the first cycle: a phase current resets each time its diodes let
go) the DC voltage is averaged over whole cycles.

Writes `bridge_average.csv`: for each DC current, the averaged DC voltage. The product's test
(`validation::bridge_average_matches_the_switched_circuit`) compares its averaged bridge with
these rows. CI does not need Python; run this script only to re-create the fixture:

    python3 tests/reference/bridge_reference.py > tests/reference/bridge_average.csv
"""

import math
import sys

import numpy as np

# The circuit (chosen numbers, not a particular machine).
E_PHASE_RMS = 10.0  # V, per-phase EMF, RMS
FREQ_HZ = 50.0  # electrical frequency
L_PHASE = 2e-3  # H per phase
R_PHASE = 1e-3  # ohm per phase
G_ON = 1e5  # S, a conducting diode
G_OFF = 1e-9  # S, a blocking diode
H = 2e-6  # s, time step
CYCLES_SETTLE = 2
CYCLES_AVERAGE = 2

W = 2.0 * math.pi * FREQ_HZ
V_LL = math.sqrt(3.0) * E_PHASE_RMS
X = W * L_PHASE
# Peak of the line-to-line short-circuit current (sets the scale of the DC currents swept).
I_S2 = math.sqrt(2.0) * V_LL / (2.0 * X)

# Unknown node voltages: star point n, legs a, b, c, positive rail p (negative rail m = 0).
N, A, B, C, P = range(5)
LEGS = (A, B, C)


def simulate(i_d):
    """Average DC voltage (p - m) with the DC side drawing i_d."""
    g_branch = 1.0 / (R_PHASE + L_PHASE / H)
    i_phase = np.zeros(3)
    # Diode states: upper (leg -> p) and lower (m -> leg); start with a sensible set.
    upper = [True, False, False]
    lower = [False, True, False]
    steps_cycle = int(round(1.0 / (FREQ_HZ * H)))
    n_steps = steps_cycle * (CYCLES_SETTLE + CYCLES_AVERAGE)
    v_sum = 0.0
    n_avg = 0
    for step in range(1, n_steps + 1):
        t = step * H
        e = [
            math.sqrt(2.0) * E_PHASE_RMS * math.sin(W * t - 2.0 * math.pi * k / 3.0)
            for k in range(3)
        ]
        for _ in range(20):
            g = np.zeros((5, 5))
            rhs = np.zeros(5)
            for k, leg in enumerate(LEGS):
                # Branch n -> leg: i = G*(v_n + e_k - v_leg) + G*(L/H)*i_old.
                hist = g_branch * (L_PHASE / H) * i_phase[k]
                for (x, y, s) in ((N, N, 1), (N, leg, -1), (leg, N, -1), (leg, leg, 1)):
                    g[x, y] += s * g_branch
                # Current leaving n into the branch: G*(v_n - v_leg) + G*e_k + hist.
                rhs[N] -= g_branch * e[k] + hist
                rhs[leg] += g_branch * e[k] + hist
                gu = G_ON if upper[k] else G_OFF
                g[leg, leg] += gu
                g[leg, P] -= gu
                g[P, leg] -= gu
                g[P, P] += gu
                gl = G_ON if lower[k] else G_OFF
                g[leg, leg] += gl  # lower diode from m (0 V) to the leg
            rhs[P] -= i_d
            v = np.linalg.solve(g, rhs)
            changed = False
            for k, leg in enumerate(LEGS):
                vu = v[leg] - v[P]
                if upper[k] and vu < 0.0:
                    upper[k] = False
                    changed = True
                elif not upper[k] and vu > 0.0:
                    upper[k] = True
                    changed = True
                vl = -v[leg]
                if lower[k] and vl < 0.0:
                    lower[k] = False
                    changed = True
                elif not lower[k] and vl > 0.0:
                    lower[k] = True
                    changed = True
            if not changed:
                break
        else:
            raise RuntimeError(f"diode states did not settle at t = {t}")
        for k, leg in enumerate(LEGS):
            i_phase[k] = g_branch * (v[N] + e[k] - v[leg]) + g_branch * (L_PHASE / H) * i_phase[k]
        if step > steps_cycle * CYCLES_SETTLE:
            v_sum += v[P]
            n_avg += 1
    return v_sum / n_avg


def main():
    out = sys.stdout
    out.write(
        "# six-diode bridge, switched simulation (tests/reference/bridge_reference.py): "
        f"E_phase_rms {E_PHASE_RMS} V, {FREQ_HZ} Hz, L {L_PHASE} H, R {R_PHASE} ohm per phase\n"
    )
    out.write("phase_emf_rms_v,frequency_hz,phase_inductance_h,phase_resistance_ohm,dc_current_a,dc_voltage_v\n")
    # DC currents from light load through the three modes up to near short circuit, as
    # fractions of I_S2 (mode I ends at 0.5, mode II at sqrt(3)/2, short circuit 2/sqrt(3)).
    for f in (0.05, 0.15, 0.3, 0.45, 0.55, 0.65, 0.75, 0.85, 0.95, 1.05, 1.12):
        i_d = f * I_S2
        v = simulate(i_d)
        out.write(f"{E_PHASE_RMS},{FREQ_HZ},{L_PHASE},{R_PHASE},{i_d:.6f},{v:.6f}\n")
        out.flush()


if __name__ == "__main__":
    main()
