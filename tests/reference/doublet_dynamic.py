#!/usr/bin/env python3
"""Independent periodic steady state of a multi-tanh doublet with charge storage.

The circuit, written out here from its stated equations (not from the crate's code): two
emitter-coupled pairs on the same differential input and the same two load resistors R_L
(each with C_L to the supply); pair 1 has emitter areas A:1 (P:M), pair 2 has 1:A; each pair
has its own tail source I/2 with output resistance 2·R_tail and tail capacitance C_T/2, and
R_E in each emitter. Each transistor of area a (forward-active, its collector-base junction
reverse-biased throughout):

    I_C = a·I_S·exp(V_BE/φT)·(1 + V_CE/V_A),   I_B = a·I_S·exp(V_BE/φT)/β
    base resistance r_b/a between the input and the intrinsic base,
    Q_BE = τ_F·I_C + a·Q_j(V_BE; C_je, V_je, m_e),   Q_BC = a·Q_j(V_BC; C_jc, V_jc, m_c)

with the depletion capacitance C_j0·(1 − V/V_j)^(−m) below F_C·V_j (F_C = 0.5) and its
tangent continuation above (the usual Gummel–Poon/SPICE form, from memory). Each P transistor
carries a saturation-current mismatch δ (P = M·(1 + δ)). The input drives V_cm ± v_d/2 with
v_d = A_in·cos(2πft) directly (no source resistance).

Nodal analysis: KCL at the twelve nodes (two bases, two emitters and a tail per pair, the two
collectors) is C(v)·dv/dt = −g(v, t), with g the resistive currents leaving each node and C(v)
the incremental capacitance matrix of the charges; every node has a capacitive path to ground
(R_E > 0 keeps the emitters apart from the tails), so C is invertible and this is an ODE.
It is integrated with scipy's Radau IIA (implicit, fifth order) at rtol 1e-11 from the DC
point for 40 periods; the harmonics of V_C,M − V_C,P over the last period (512 samples of the
dense output, numpy FFT) are reported, with their change from the period before as the
settling check.

Run: python3 tests/reference/doublet_dynamic.py   (prints one line per amplitude)
"""

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import fsolve

# CODATA 2018 exact values.
K_B = 1.380649e-23
Q_E = 1.602176634e-19
PHI = K_B * (27.0 + 273.15) / Q_E

# The stage (tests/cell_dynamics.rs builds the same one).
TAIL = 1e-3
R_L = 2e3
SUPPLY = 5.0
V_CM = 2.5
R_E = 50.0
R_TAIL = 200e3
C_L = 0.5e-12
C_T = 1e-12
I_S = 1e-16
BETA = 120.0
R_B = 150.0
V_A = 60.0
TAU_F = 25e-12
C_JE, V_JE, M_E = 60e-15, 0.75, 0.33
C_JC, V_JC, M_C = 40e-15, 0.75, 0.33
F_C = 0.5
AREA = 2.0 + np.sqrt(3.0)
DELTA = 0.01

# (area P, area M) per pair.
PAIRS = [(AREA, 1.0), (1.0, AREA)]
# Node indices: per pair k: B_P, B_M, E_P, E_M, T at 5k..5k+4; collectors C_P, C_M at 10, 11.
C_P, C_M = 10, 11
NODES = 12


def depletion_capacitance(v, c0, vj, m):
    if v < F_C * vj:
        return c0 * (1.0 - v / vj) ** (-m)
    return c0 / (1.0 - F_C) ** (1.0 + m) * (1.0 - F_C * (1.0 + m) + m * v / vj)


def devices():
    """(pair, side, area, saturation current, base, emitter, collector, tail) of each transistor."""
    out = []
    for k, (area_p, area_m) in enumerate(PAIRS):
        base = 5 * k
        out.append((k, 0, area_p, I_S * area_p * (1.0 + DELTA), base, base + 2, C_P, base + 4))
        out.append((k, 1, area_m, I_S * area_m, base + 1, base + 3, C_M, base + 4))
    return out


DEVICES = devices()


def drive(t, amplitude, frequency):
    return amplitude * np.cos(2.0 * np.pi * frequency * t)


def resistive(v, t, amplitude, frequency):
    """Currents leaving each node through resistors, sources and transistor terminals."""
    g = np.zeros(NODES)
    v_d = drive(t, amplitude, frequency)
    for (_, side, area, i_s, b, e, c, tail) in DEVICES:
        v_in = V_CM + (0.5 if side == 0 else -0.5) * v_d
        j = i_s * np.exp((v[b] - v[e]) / PHI)
        i_c = j * (1.0 + (v[c] - v[e]) / V_A)
        i_b = j / BETA
        i_re = (v[e] - v[tail]) / R_E
        g[b] += (v[b] - v_in) / (R_B / area) + i_b
        g[e] += i_re - i_c - i_b
        g[tail] -= i_re
        g[c] += i_c
    for k in range(len(PAIRS)):
        tail = 5 * k + 4
        g[tail] += 0.5 * TAIL + v[tail] / (2.0 * R_TAIL)
    g[C_P] += (v[C_P] - SUPPLY) / R_L
    g[C_M] += (v[C_M] - SUPPLY) / R_L
    return g


def capacitance(v):
    """C(v): row n, column m = ∂(charge leaving node n)/∂v_m."""
    cap = np.zeros((NODES, NODES))

    def element(plus, minus, gradient):
        # A charge q on an element from `plus` to `minus` (None = ground) with ∂q/∂v.
        cap[plus] += gradient
        if minus is not None:
            cap[minus] -= gradient

    for (_, _, area, i_s, b, e, c, _) in DEVICES:
        j = i_s * np.exp((v[b] - v[e]) / PHI)
        early = 1.0 + (v[c] - v[e]) / V_A
        i_c = j * early
        gradient = np.zeros(NODES)
        # τ_F·I_C.
        gradient[b] += TAU_F * i_c / PHI
        gradient[e] += TAU_F * (-i_c / PHI - j / V_A)
        gradient[c] += TAU_F * j / V_A
        c_be = area * depletion_capacitance(v[b] - v[e], C_JE, V_JE, M_E)
        gradient[b] += c_be
        gradient[e] -= c_be
        element(b, e, gradient)
        c_bc = area * depletion_capacitance(v[b] - v[c], C_JC, V_JC, M_C)
        gradient = np.zeros(NODES)
        gradient[b] += c_bc
        gradient[c] -= c_bc
        element(b, c, gradient)
    for k in range(len(PAIRS)):
        tail = 5 * k + 4
        gradient = np.zeros(NODES)
        gradient[tail] = 0.5 * C_T
        element(tail, None, gradient)
    for c in (C_P, C_M):
        gradient = np.zeros(NODES)
        gradient[c] = C_L
        element(c, None, gradient)
    return cap


def steady_harmonics(amplitude, frequency, periods=40, samples=512, orders=(2, 3, 5)):
    # DC point at the drive's starting value, from a guess of the bias.
    guess = np.zeros(NODES)
    for (_, _, _, _, b, e, c, tail) in DEVICES:
        guess[b] = V_CM
        guess[e] = V_CM - 0.7
        guess[tail] = V_CM - 0.72
    guess[C_P] = guess[C_M] = SUPPLY - 0.5 * TAIL * R_L
    start = fsolve(lambda v: resistive(v, 0.0, amplitude, frequency), guess, xtol=1e-14)
    period = 1.0 / frequency

    def rate(t, v):
        return np.linalg.solve(capacitance(v), -resistive(v, t, amplitude, frequency))

    solution = solve_ivp(rate, (0.0, periods * period), start, method="Radau",
                         rtol=1e-11, atol=1e-14, dense_output=True)
    assert solution.success, solution.message

    def spectrum(last):
        t = (last + np.arange(samples) / samples) * period
        v = solution.sol(t)
        out = v[C_M] - v[C_P]
        phasors = np.abs(np.fft.rfft(out)) * 2.0 / samples
        return 20.0 * np.log10(phasors[1] / amplitude), [
            20.0 * np.log10(phasors[n] / phasors[1]) for n in orders]

    gain, harmonics = spectrum(periods - 1)
    gain_before, before = spectrum(periods - 2)
    change = max([abs(gain - gain_before)] + [abs(a - b) for a, b in zip(harmonics, before)])
    return gain, harmonics, change


if __name__ == "__main__":
    frequency = 50e6
    for amplitude in (20e-3, 60e-3):
        gain, (hd2, hd3, hd5), change = steady_harmonics(amplitude, frequency)
        print(f"amplitude {amplitude:.3f} V at {frequency:.3e} Hz: gain {gain:.6f} dB, "
              f"HD2 {hd2:.6f} dBc, HD3 {hd3:.6f} dBc, HD5 {hd5:.6f} dBc "
              f"(change over the last period {change:.1e} dB)")
