#!/usr/bin/env python3
"""Independent reference for the emitter-coupled pair over the whole drive range.

Written from the model as specs/README.md states it (the Gummel-Poon core of Gummel & Poon,
1970, as quoted there; no linbudget code is used or imitated), this script solves the pair's
equations with general-purpose tools and writes the figures the Rust test
tests/saturation_reference.rs compares against: gain, HD2, HD3, HD5 and THD (harmonics 2..40)
of the differential output, for memoryless stages (static) and stages with charge storage
(periodic steady state at two frequencies).

Per side, with intrinsic junction voltages V_BE, V_BC and phi = kT/q:
    I_CC = I_S (exp(V_BE/phi) - 1),  I_EC = I_S (exp(V_BC/phi) - 1)
    1/q_1 = 1 + (V_BE - V_BC)/V_AF - V_BE/V_AR,  q_2 = I_CC/I_KF + I_EC/I_KR
    q_b = q_1 (1 + sqrt(1 + 4 q_2))/2
    I_C = (I_CC - I_EC)/q_b - I_EC/beta_R,  I_B = I_CC/beta_F + I_EC/beta_R
Circuit: V_in = V_CM +/- v_d/2 through R_S + r_b to the intrinsic base; R_E from the intrinsic
emitter to the tail node; r_c from the intrinsic collector to the collector terminal; R_L from
the terminal to the supply; the tail node goes to ground through the ideal source I_tail and
R_tail. Output: V_C,M - V_C,P (terminals). Charges (dynamic cases): Q_BE = tau_F I_CC/q_b +
Qj(V_BE; C_je), Q_BC = tau_R I_EC + Qj(V_BC; C_jc) on the intrinsic junctions; C_L across each
R_L; C_T from the tail node to ground; Qj the integral of C_j0 (1 - V/V_j)^-m below V_j/2 and
of its tangent line above.

Static method: every sample of one period solved by scipy.optimize.root (MINPACK hybrd) on the
five unknowns (tail voltage, V_BE and V_BC of each side), continued sample to sample from zero
input; harmonics from numpy's FFT of N = 4096 samples (checked against N = 8192).
Dynamic method: the charge-form DAE f(x) + B dq(x)/dt = 0 integrated with the 3-stage Radau
IIA collocation (order 5, stiffly accurate; Hairer & Wanner, Solving ODEs II, from memory), a
method unlike the project's trapezoidal rule, Newton on the stages with a finite-difference
Jacobian, period after period until the state repeats to 1e-11 V; harmonics from the FFT of
the last period's step values (checked by halving the step).

Usage:  python3 gummel_poon_pair.py            # writes gummel_poon_pair.json beside itself
        python3 gummel_poon_pair.py drawn-pair # recomputes that case only
Needs numpy and scipy (pip install numpy scipy).
"""
import json
import math
import os
import sys

import numpy as np
from scipy.optimize import root

BOLTZMANN = 1.380649e-23          # J/K, CODATA 2018 (exact)
CHARGE = 1.602176634e-19          # C, CODATA 2018 (exact)
T_K = 300.15                       # 27 degC
PHI = BOLTZMANN * T_K / CHARGE
FC = 0.5                           # forward-bias coefficient of the junction capacitance
INF = math.inf


def inv(x):
    return 0.0 if math.isinf(x) else 1.0 / x


MISMATCHED = ["saturation_current", "beta", "base_resistance", "emitter_resistance",
              "load_resistance", "load_capacitance", "emitter_junction_capacitance",
              "collector_junction_capacitance", "transit_time"]


class Side:
    """One side's elements. Mismatch is stated as P over M: the P side (sign +1) takes the
    nominal value times (1 + delta) for each `mismatch_<element>` key; the M side is nominal.
    A source resistance is outside the device and is not mismatched."""

    def __init__(self, c, sign):
        def value(key):
            delta = c.get("mismatch_" + key, 0.0) if sign > 0 else 0.0
            return c[key] * (1.0 + delta)
        self.sign = sign
        self.i_s = value("saturation_current")
        self.bf, self.br = inv(value("beta")), inv(c["reverse_beta"])
        self.vaf, self.var = inv(c["early_voltage"]), inv(c["reverse_early_voltage"])
        self.ikf, self.ikr = inv(c["forward_knee_current"]), inv(c["reverse_knee_current"])
        self.r_b = c["source_resistance"] + value("base_resistance")
        self.r_e = value("emitter_resistance")
        self.r_l = value("load_resistance")
        self.r_c = c["collector_resistance"]
        self.c_l = value("load_capacitance")
        self.c_je = value("emitter_junction_capacitance")
        self.c_jc = value("collector_junction_capacitance")
        self.tau_f = value("transit_time")

    def currents(self, vbe, vbc):
        ef, er = math.exp(vbe / PHI), math.exp(vbc / PHI)
        icc, iec = self.i_s * (ef - 1.0), self.i_s * (er - 1.0)
        q1 = 1.0 / (1.0 + (vbe - vbc) * self.vaf - vbe * self.var)
        q2 = icc * self.ikf + iec * self.ikr
        qb = q1 * (1.0 + math.sqrt(1.0 + 4.0 * q2)) / 2.0
        ic = self.i_s * (ef - er) / qb - iec * self.br
        ib = icc * self.bf + iec * self.br
        return ic, ib, icc / qb, iec


def junction_charge(v, cj0, vj, m):
    if cj0 == 0.0:
        return 0.0
    knee = FC * vj

    def below(x):
        return cj0 * vj / (1.0 - m) * (1.0 - (1.0 - x / vj) ** (1.0 - m))
    if v < knee:
        return below(v)
    # Tangent line of C(V) at the knee, integrated: C(V) = C(knee) + C'(knee) (V - knee).
    c_knee = cj0 * (1.0 - FC) ** (-m)
    slope = cj0 * m / vj * (1.0 - FC) ** (-m - 1.0)
    d = v - knee
    return below(knee) + c_knee * d + 0.5 * slope * d * d


class Pair:
    """The stage's equations; unknowns x = [T, B_P, E_P, C_P, C'_P, B_M, E_M, C_M, C'_M]."""

    def __init__(self, c):
        self.c = c
        self.sides = [Side(c, +1), Side(c, -1)]
        self.g_tail = inv(c["tail_resistance"])
        self.scale = c["load_resistance"]

    # --- static: 5 unknowns [T, vbe_P, vbc_P, vbe_M, vbc_M] ---------------------------
    def static_residual(self, y, v_d):
        c = self.c
        t = y[0]
        out, emitter = [], 0.0
        for k, s in enumerate(self.sides):
            vbe, vbc = y[1 + 2 * k], y[2 + 2 * k]
            v_in = c["input_common_mode"] + s.sign * 0.5 * v_d
            ic, ib, _, _ = s.currents(vbe, vbc)
            vb = v_in - s.r_b * ib
            out.append(vb - vbe - s.r_e * (ic + ib) - t)
            out.append(vb - vbc - (c["supply"] - (s.r_l + s.r_c) * ic))
            emitter += ic + ib
        out.append((emitter - c["tail_current"] - self.g_tail * t) * self.scale)
        return out

    def static_output(self, y):
        p, m = self.sides
        icp = p.currents(y[1], y[2])[0]
        icm = m.currents(y[3], y[4])[0]
        return p.r_l * icp - m.r_l * icm

    def static_guess(self):
        c = self.c
        vbe = PHI * math.log(0.5 * c["tail_current"] / c["saturation_current"])
        vbc = c["input_common_mode"] - (c["supply"] - 0.5 * c["load_resistance"] * c["tail_current"])
        return np.array([c["input_common_mode"] - vbe, vbe, min(vbc, 0.3), vbe, min(vbc, 0.3)])


def solve_static(pair, v_d, guess):
    result = root(pair.static_residual, guess, args=(v_d,), method="hybr",
                  options={"xtol": 1e-15, "maxfev": 20000})
    # MINPACK may stop on "no further improvement" at machine precision: the residual decides.
    if max(abs(r) for r in result.fun) > 1e-11:
        raise RuntimeError(f"static solve failed at v_d = {v_d}: {result.message}")
    return result.x


def static_waveform(pair, amplitude, n):
    theta = 2 * np.pi * np.arange(n) / n
    v = amplitude * np.cos(theta)
    out = np.zeros(n)
    y = solve_static(pair, 0.0, pair.static_guess())
    # Continue from zero input (theta = pi/2) around the period, in small input steps.
    order = [(n // 4 + i) % n for i in range(n)]
    previous = 0.0
    for i in order:
        target = v[i]
        steps = max(1, int(abs(target - previous) / 0.002))
        for s in range(1, steps + 1):
            y = solve_static(pair, previous + (target - previous) * s / steps, y)
        previous = target
        out[i] = pair.static_output(y)
    return out


def figures(wave, amplitude, harmonics=40):
    spectrum = np.abs(np.fft.rfft(wave)) * 2.0 / len(wave)
    fundamental = spectrum[1]
    level = lambda k: 20 * math.log10(spectrum[k] / fundamental) if spectrum[k] > 0 else -math.inf
    thd = math.sqrt(float(np.sum(spectrum[2:harmonics + 1] ** 2))) / fundamental
    return {
        "gain_db": 20 * math.log10(fundamental / amplitude),
        "hd2_dbc": level(2), "hd3_dbc": level(3), "hd5_dbc": level(5),
        "thd_dbc": 20 * math.log10(thd),
    }


# --- dynamic: Radau IIA on f(x, t) + B dq(x)/dt = 0 ------------------------------------
SQ6 = math.sqrt(6.0)
RADAU_A = np.array([
    [(88 - 7 * SQ6) / 360, (296 - 169 * SQ6) / 1800, (-2 + 3 * SQ6) / 225],
    [(296 + 169 * SQ6) / 1800, (88 + 7 * SQ6) / 360, (-2 - 3 * SQ6) / 225],
    [(16 - SQ6) / 36, (16 + SQ6) / 36, 1.0 / 9],
])
RADAU_C = np.array([(4 - SQ6) / 10, (4 + SQ6) / 10, 1.0])
RADAU_A_INV = np.linalg.inv(RADAU_A)


class DynamicPair(Pair):
    """Nodes x = [T, B_P, E_P, C_P, C'_P, B_M, E_M, C_M, C'_M]; charges
    q = [Q_BE_P, Q_BC_P, Q_L_P, Q_BE_M, Q_BC_M, Q_L_M, Q_T]."""

    def __init__(self, c, drive):
        super().__init__(c)
        self.drive = drive  # function of time -> v_d

    def f(self, x, t):
        c = self.c
        v_d = self.drive(t)
        r = np.zeros(9)
        emitter = 0.0
        for k, s in enumerate(self.sides):
            b, e, col, ci = x[1 + 4 * k], x[2 + 4 * k], x[3 + 4 * k], x[4 + 4 * k]
            v_in = c["input_common_mode"] + s.sign * 0.5 * v_d
            ic, ib, _, _ = s.currents(b - e, b - ci)
            # Base path current and emitter current: charge currents enter through B.
            r[1 + 4 * k] = v_in - b - s.r_b * ib
            r[2 + 4 * k] = e - x[0] - s.r_e * (ic + ib)
            r[3 + 4 * k] = c["supply"] - col - s.r_l * ic
            r[4 + 4 * k] = col - ci - s.r_c * ic
            emitter += ic + ib
        r[0] = (emitter - c["tail_current"] - self.g_tail * x[0]) * self.scale
        return r

    def q(self, x):
        c = self.c
        out = np.zeros(7)
        for k, s in enumerate(self.sides):
            b, e, col, ci = x[1 + 4 * k], x[2 + 4 * k], x[3 + 4 * k], x[4 + 4 * k]
            _, _, forward, reverse = s.currents(b - e, b - ci)
            out[3 * k] = s.tau_f * forward + junction_charge(b - e, s.c_je, 0.75, 0.33)
            out[3 * k + 1] = c["reverse_transit_time"] * reverse + junction_charge(
                b - ci, s.c_jc, 0.75, 0.33)
            out[3 * k + 2] = s.c_l * (c["supply"] - col)
        out[6] = c["tail_capacitance"] * x[0]
        return out

    def coupling(self, i):
        """B times the charge currents i: how each charge current enters each equation."""
        out = np.zeros(9)
        for k, s in enumerate(self.sides):
            i_be, i_bc, i_l = i[3 * k], i[3 * k + 1], i[3 * k + 2]
            out[1 + 4 * k] += -s.r_b * (i_be + i_bc)
            out[2 + 4 * k] += -s.r_e * i_be
            out[3 + 4 * k] += s.r_l * (i_l + i_bc)
            out[4 + 4 * k] += s.r_c * i_bc
            out[0] += i_be * self.scale
        out[0] -= i[6] * self.scale
        return out


def radau_step(pair, x, t, h, kept):
    """One step from x at t; `kept` holds the stage Jacobian between steps (simplified
    Newton: it is rebuilt when an iteration does not shrink the correction tenfold)."""
    n = len(x)
    q0 = pair.q(x)
    stages = np.tile(x, 3)

    def residual(z):
        xs = z.reshape(3, n)
        qs = np.array([pair.q(xi) for xi in xs])
        k = RADAU_A_INV @ (qs - q0) / h
        return np.concatenate([pair.f(xs[j], t + RADAU_C[j] * h) + pair.coupling(k[j])
                               for j in range(3)])

    def jacobian(z):
        jac = np.zeros((3 * n, 3 * n))
        for col in range(3 * n):
            dz = np.zeros(3 * n)
            dz[col] = 1e-7
            jac[:, col] = (residual(z + dz) - residual(z - dz)) / 2e-7
        return jac

    last = math.inf
    for _ in range(60):
        r = residual(stages)
        if "jac" not in kept:
            kept["jac"] = jacobian(stages)
        delta = np.linalg.solve(kept["jac"], -r)
        largest = np.max(np.abs(delta))
        if largest > 0.1 * last:
            kept["jac"] = jacobian(stages)
            delta = np.linalg.solve(kept["jac"], -r)
            largest = np.max(np.abs(delta))
        # Junction limiting: no node moves by more than 4 phi per iteration.
        stages = stages + delta * min(1.0, 4 * PHI / largest)
        last = largest
        if largest < 1e-13:
            break
    else:
        raise RuntimeError(f"Radau Newton did not converge at t = {t}")
    return stages.reshape(3, n)[2]


def dynamic_start(pair):
    c = pair.c
    static = Pair(c)
    y = solve_static(static, pair.drive(0.0), static.static_guess()) if pair.drive(0.0) == 0.0 \
        else solve_static(static, 0.0, static.static_guess())
    x = np.zeros(9)
    x[0] = y[0]
    for k, s in enumerate(static.sides):
        vbe, vbc = y[1 + 2 * k], y[2 + 2 * k]
        ic, ib, _, _ = s.currents(vbe, vbc)
        b = c["input_common_mode"] - s.r_b * ib
        x[1 + 4 * k] = b
        x[2 + 4 * k] = b - vbe
        x[3 + 4 * k] = c["supply"] - s.r_l * ic
        x[4 + 4 * k] = b - vbc
    return x


def dynamic_waveform(c, amplitude, frequency, steps):
    period = 1.0 / frequency
    pair = DynamicPair(c, lambda t: amplitude * math.cos(2 * math.pi * frequency * t))
    x = dynamic_start(pair)
    # Ramp the drive in over the first periods so Newton never sees a jump.
    ramp_periods = 3
    pair.drive = lambda t: amplitude * min(1.0, t / (ramp_periods * period)) * math.cos(2 * math.pi * frequency * t)
    h = period / steps
    t = 0.0
    previous = None
    kept = {}
    for cycle in range(200):
        wave = np.zeros(steps)
        start_state = x.copy()
        for i in range(steps):
            wave[i] = x[7] - x[3]   # V_C,M - V_C,P at the start of each step
            x = radau_step(pair, x, t, h, kept)
            t += h
        if cycle >= ramp_periods and np.max(np.abs(x - start_state)) < 1e-11:
            return wave
        previous = wave
    raise RuntimeError("no periodic steady state in 200 periods")


STAGE_DEFAULTS = {
    "saturation_current": 1e-16, "beta": 100.0, "reverse_beta": 1.0, "early_voltage": INF,
    "reverse_early_voltage": INF, "forward_knee_current": INF, "reverse_knee_current": INF,
    "source_resistance": 0.0, "base_resistance": 0.0, "emitter_resistance": 0.0,
    "collector_resistance": 0.0, "tail_resistance": INF, "transit_time": 0.0,
    "reverse_transit_time": 0.0, "emitter_junction_capacitance": 0.0,
    "collector_junction_capacitance": 0.0, "load_capacitance": 0.0, "tail_capacitance": 0.0,
}
STAGE_DEFAULTS.update({"mismatch_" + key: 0.0 for key in MISMATCHED})

CASES = [
    # Low supply, hard drive: saturation from about 60 mV; slight I_S mismatch for HD2.
    {"name": "low-supply", "dynamic": False,
     "stage": {"tail_current": 1e-3, "load_resistance": 2e3, "emitter_resistance": 50.0,
               "source_resistance": 50.0, "base_resistance": 100.0, "beta": 100.0,
               "reverse_beta": 2.0, "early_voltage": 40.0, "supply": 3.0,
               "input_common_mode": 1.6, "mismatch_saturation_current": 0.01},
     "amplitudes": [0.01, 0.06, 0.2, 0.6]},
    # High-level injection, collector resistance (quasi-saturation), reverse Early and knee.
    {"name": "knee-and-rc", "dynamic": False,
     "stage": {"tail_current": 4e-3, "load_resistance": 500.0, "emitter_resistance": 10.0,
               "base_resistance": 50.0, "beta": 120.0, "reverse_beta": 3.0,
               "early_voltage": 30.0, "reverse_early_voltage": 4.0,
               "forward_knee_current": 1e-3, "reverse_knee_current": 2e-4,
               "collector_resistance": 150.0, "supply": 3.3, "input_common_mode": 1.8,
               "tail_resistance": 5e3, "mismatch_saturation_current": 0.02},
     "amplitudes": [0.005, 0.05, 0.3, 1.0]},
    # Charge storage, driven into saturation, at two frequencies.
    {"name": "charged", "dynamic": True,
     "stage": {"tail_current": 1e-3, "load_resistance": 2e3, "emitter_resistance": 50.0,
               "source_resistance": 50.0, "base_resistance": 100.0, "beta": 100.0,
               "reverse_beta": 2.0, "early_voltage": 40.0, "supply": 3.0,
               "input_common_mode": 1.6, "collector_resistance": 50.0,
               "transit_time": 20e-12, "reverse_transit_time": 2e-9,
               "emitter_junction_capacitance": 100e-15,
               "collector_junction_capacitance": 50e-15, "load_capacitance": 0.5e-12,
               "tail_capacitance": 1e-12, "tail_resistance": 20e3,
               "mismatch_saturation_current": 0.01},
     "amplitudes": [0.05, 0.4], "frequencies": [2e6, 20e6]},
    # One drawn pair of a capacitive stage at high frequency: every element of the P side off
    # by a fraction of the size one Monte Carlo draw gives (invented values), so the even
    # harmonics come from unequal charges as much as from the static offset.
    {"name": "drawn-pair", "dynamic": True,
     "stage": {"tail_current": 2e-3, "load_resistance": 1e3, "emitter_resistance": 50.0,
               "source_resistance": 50.0, "base_resistance": 80.0, "beta": 100.0,
               "supply": 5.0, "input_common_mode": 2.5, "transit_time": 10e-12,
               "emitter_junction_capacitance": 80e-15,
               "collector_junction_capacitance": 40e-15, "load_capacitance": 0.5e-12,
               "tail_capacitance": 1e-12,
               "mismatch_saturation_current": 0.003, "mismatch_beta": 0.01,
               "mismatch_base_resistance": -0.01, "mismatch_emitter_resistance": 0.002,
               "mismatch_load_resistance": -0.002, "mismatch_load_capacitance": 0.03,
               "mismatch_emitter_junction_capacitance": -0.02,
               "mismatch_collector_junction_capacitance": 0.03,
               "mismatch_transit_time": 0.04},
     "amplitudes": [0.02, 0.1], "frequencies": [100e6]},
]


def main():
    # Case names on the command line recompute only those cases and keep the others from the
    # JSON already written.
    only = set(sys.argv[1:])
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "gummel_poon_pair.json")
    kept = {}
    if only:
        with open(path) as f:
            kept = {c["name"]: c for c in json.load(f)["cases"]}
    cases = []
    for case in CASES:
        if only and case["name"] not in only:
            cases.append(kept[case["name"]])
            continue
        stage = dict(STAGE_DEFAULTS, **case["stage"])
        results = []
        if not case["dynamic"]:
            pair = Pair(stage)
            for a in case["amplitudes"]:
                fine = figures(static_waveform(pair, a, 8192), a)
                coarse = figures(static_waveform(pair, a, 4096), a)
                spread = max(abs(fine[k] - coarse[k]) for k in fine
                             if math.isfinite(fine[k]) and fine[k] > -120)
                results.append(dict(amplitude_v=a, frequency_hz=1e3, resolution_db=spread, **fine))
                print(case["name"], a, fine, f"(N 4096 vs 8192: {spread:.1e} dB)", file=sys.stderr)
        else:
            for f in case["frequencies"]:
                for a in case["amplitudes"]:
                    fine = figures(dynamic_waveform(stage, a, f, 256), a)
                    coarse = figures(dynamic_waveform(stage, a, f, 128), a)
                    spread = max(abs(fine[k] - coarse[k]) for k in fine
                                 if math.isfinite(fine[k]) and fine[k] > -120)
                    results.append(dict(amplitude_v=a, frequency_hz=f, resolution_db=spread, **fine))
                    print(case["name"], f, a, fine, f"(128 vs 256 steps: {spread:.1e} dB)",
                          file=sys.stderr)
        stage_out = {k: (None if isinstance(v, float) and math.isinf(v) else v)
                     for k, v in stage.items()}
        cases.append({"name": case["name"], "dynamic": case["dynamic"], "stage": stage_out,
                      "temperature_c": 27.0, "results": results})
    with open(path, "w") as f:
        json.dump({"generated_by": "tests/reference/gummel_poon_pair.py",
                   "thermal_voltage_v": PHI, "cases": cases}, f, indent=1)
    print(f"wrote {path}", file=sys.stderr)


if __name__ == "__main__":
    main()
