#!/usr/bin/env python3
"""Reference cases for the multi-hole probe inversion (nav-core `probe`).

Regenerate (from the workspace root):

    python3 tests/reference/probe_reference.py

It writes tests/reference/probe_cases.json, read by
tests/tests/probe_reference.rs, and prints scipy's time per solve.

For the speed comparison, time scipy and the Rust solver side by side in
the same session (the stored time in the JSON is a record, not a figure):

    us=$(python3 tests/reference/probe_reference.py --time)
    cargo run --release -p nav-core --example probe_accuracy -- --scipy-us-per-solve "$us"

`--time` only times least_squares on the probe_accuracy problem (no file
is written) and prints the microseconds per solve alone on its line.

Made with: Python 3 (see "meta" in the JSON), numpy and scipy versions
recorded in the JSON's "meta" block (first committed with scipy 1.17.1,
numpy 2.4.6).

What it does
------------
The forward model is written here independently from the Rust code, from
the same published relations:
  p_i = p_s + A * S(c_i),  c_i = cos(theta_i) = n_i . d,  d = -v_hat
  incompressible:       A = q = gamma/2 p_s M^2,     S = -5/4 + 9/4 c^2
                        (sphere potential flow, Anderson, Fundamentals of
                        Aerodynamics, flow over a sphere)
  compressible subsonic A = p_s ((1 + (g-1)/2 M^2)^(g/(g-1)) - 1) (NACA 1135
                        eq. 44), same sphere shape
  supersonic            A = p_s (p02/p1 - 1), Rayleigh pitot (NACA 1135 eq.
                        100), S = max(c, 0)^2 (modified Newtonian, Lees)
Port layouts: tip (1,0,0) plus a ring at cone angle c, azimuth phi from +y
toward +z: (cos c, sin c cos phi, sin c sin phi).

For random flows over a cone (uniform in solid angle), Gaussian port noise
(numpy default_rng with a fixed seed), scipy.optimize.least_squares
minimises the weighted residuals over (azimuth, elevation, p_s, A) with an
analytic Jacobian and tight tolerances, started from the true flow (so it
finds the global minimum, the maximum-likelihood estimate). The JSON holds
the noisy pressures and scipy's answer; the Rust test solves the same
pressures and must agree with scipy, not with the truth.

It also records scipy.stats.chi2 upper quantiles, and times
least_squares (default tolerances, analytic Jacobian, started from the
same deterministic pressure-weighted start the Rust solver uses) on 2000
cases of the 7-port, 1 % noise problem.
"""

import json
import math
import platform
import sys
import time
from pathlib import Path

import numpy as np
import scipy
from scipy.optimize import brentq, least_squares
from scipy.stats import chi2

GAMMA = 1.4          # dry air (NACA Report 1135 tables)
R_AIR = 287.05       # J/(kg K), U.S. Standard Atmosphere 1976
SEED = 20240611


def layout(ports, cone_deg):
    c = math.radians(cone_deg)
    ring = ports - 1
    normals = [[1.0, 0.0, 0.0]]
    for k in range(ring):
        phi = 2.0 * math.pi * k / ring
        normals.append([math.cos(c), math.sin(c) * math.cos(phi), math.sin(c) * math.sin(phi)])
    return np.array(normals)


def shape(regime, c):
    if regime == "supersonic":
        cp = np.maximum(c, 0.0)
        return cp * cp, 2.0 * cp
    return -1.25 + 2.25 * c * c, 4.5 * c


def p0_over_p(m):
    return (1.0 + 0.5 * (GAMMA - 1.0) * m * m) ** (GAMMA / (GAMMA - 1.0))


def rayleigh(m):
    g = GAMMA
    m2 = m * m
    return (0.5 * (g + 1.0) * m2) ** (g / (g - 1.0)) * ((g + 1.0) / (2.0 * g * m2 - (g - 1.0))) ** (1.0 / (g - 1.0))


def amplitude(regime, ps, mach):
    if regime == "incompressible":
        return 0.5 * GAMMA * ps * mach * mach
    if regime == "compressible":
        return ps * (p0_over_p(mach) - 1.0)
    return ps * (rayleigh(mach) - 1.0)


def mach_from(regime, ps, a):
    if a <= 0.0:
        return 0.0
    if regime == "incompressible":
        return math.sqrt(2.0 * a / (GAMMA * ps))
    r = 1.0 + a / ps
    if regime == "compressible" or r <= p0_over_p(1.0):
        return math.sqrt(2.0 / (GAMMA - 1.0) * (r ** ((GAMMA - 1.0) / GAMMA) - 1.0))
    return brentq(lambda m: rayleigh(m) - r, 1.0, 50.0, xtol=1e-15, rtol=1e-15)


def direction(az, el):
    """Unit vector the flow comes from: (cos el cos az, cos el sin az, sin el)."""
    return np.array([math.cos(el) * math.cos(az), math.cos(el) * math.sin(az), math.sin(el)])


def residuals(x, y, w, normals, regime):
    az, el, ps, a = x
    d = direction(az, el)
    s, _ = shape(regime, normals @ d)
    return w * (y - ps - a * s)


def jacobian(x, y, w, normals, regime):
    az, el, ps, a = x
    d = direction(az, el)
    dd_daz = np.array([-math.cos(el) * math.sin(az), math.cos(el) * math.cos(az), 0.0])
    dd_del = np.array([-math.sin(el) * math.cos(az), -math.sin(el) * math.sin(az), math.cos(el)])
    s, ds = shape(regime, normals @ d)
    j = np.empty((len(y), 4))
    j[:, 0] = -w * a * ds * (normals @ dd_daz)
    j[:, 1] = -w * a * ds * (normals @ dd_del)
    j[:, 2] = -w
    j[:, 3] = -w * s
    return j


def solve(y, sigma, normals, regime, x0, tight):
    w = 1.0 / sigma
    kw = dict(ftol=1e-15, xtol=1e-15, gtol=1e-15, max_nfev=2000) if tight else {}
    return least_squares(residuals, x0, jac=jacobian, args=(y, w, normals, regime),
                         method="trf", x_scale="jac", **kw)


def heuristic_start(y, sigma, normals, regime):
    """The Rust solver's deterministic start: pressure-weighted mean normal,
    then (p_s, A) in closed form."""
    t = (y - y.min()) ** 2
    s = normals.T @ t
    d = s / np.linalg.norm(s) if np.linalg.norm(s) > 0 else np.array([1.0, 0.0, 0.0])
    w2 = 1.0 / sigma ** 2
    sh, _ = shape(regime, normals @ d)
    m = np.array([[w2.sum(), (w2 * sh).sum()], [(w2 * sh).sum(), (w2 * sh * sh).sum()]])
    ps, a = np.linalg.solve(m, np.array([(w2 * y).sum(), (w2 * sh * y).sum()]))
    return np.array([math.atan2(d[1], d[0]), math.asin(max(-1.0, min(1.0, d[2]))), ps, a])


def random_direction(rng, cone_deg):
    cmin = math.cos(math.radians(cone_deg))
    c = 1.0 - rng.random() * (1.0 - cmin)
    s = math.sqrt(1.0 - c * c)
    phi = 2.0 * math.pi * rng.random()
    return np.array([c, s * math.cos(phi), s * math.sin(phi)])


def make_cases(rng, name, ports, cone_deg, regime, count, flow_cone_deg, ps, mach_range, noise_frac,
               bias_pa=0.0, t0_k=293.15):
    normals = layout(ports, cone_deg)
    out = []
    for _ in range(count):
        d = random_direction(rng, flow_cone_deg)
        mach = mach_range[0] + (mach_range[1] - mach_range[0]) * rng.random()
        a_true = amplitude(regime, ps, mach)
        sigma = np.full(ports, noise_frac * a_true)
        bias = bias_pa * (2.0 * rng.random(ports) - 1.0)
        s, _ = shape(regime, normals @ d)
        clean = ps + a_true * s
        y = clean + bias + sigma * rng.standard_normal(ports)
        x0 = np.array([math.atan2(d[1], d[0]), math.asin(d[2]), ps, a_true])
        res = solve(y - bias, sigma, normals, regime, x0, tight=True)
        az, el, ps_e, a_e = res.x
        d_e = direction(az, el)
        jac = res.jac
        cov = np.linalg.inv(jac.T @ jac)
        # Angle sigma: root of the trace of the direction covariance, mapped
        # from (az, el) to the unit sphere (metric diag(cos^2 el, 1)).
        metric = np.diag([math.cos(el) ** 2, 1.0])
        angle_sigma = math.sqrt(np.trace(metric @ cov[:2, :2]))
        m_e = mach_from(regime, ps_e, a_e)
        q_e = a_e if regime == "incompressible" else 0.5 * GAMMA * ps_e * m_e * m_e
        speed = m_e * math.sqrt(GAMMA * R_AIR * t0_k / (1.0 + 0.5 * (GAMMA - 1.0) * m_e * m_e))
        out.append({
            "set": name,
            "ports": ports,
            "cone_deg": cone_deg,
            "regime": regime,
            "sigma_pa": list(sigma),
            "bias_pa": list(bias),
            "total_temperature_k": t0_k,
            "pressures_pa": list(y),
            "truth": {"velocity_unit": list(-d), "static_pressure_pa": ps, "mach": mach},
            "scipy": {
                "status": int(res.status),
                "velocity_unit": list(-d_e),
                "static_pressure_pa": ps_e,
                "amplitude_pa": a_e,
                "mach": m_e,
                "dynamic_pressure_pa": q_e,
                "speed_m_per_s": speed,
                "chi_square": float(2.0 * res.cost),
                "sigma_static_pressure_pa": math.sqrt(cov[2, 2]),
                "sigma_amplitude_pa": math.sqrt(cov[3, 3]),
                "sigma_angle_rad": angle_sigma,
            },
        })
    return out


def timing(rng, count=2000):
    """least_squares with default tolerances and analytic Jacobian on the
    probe_accuracy problem (7-port, 40 deg, q = 500 Pa, 60 deg cone, 1 %)."""
    normals = layout(7, 40.0)
    ps, q, t0 = 101325.0, 500.0, 293.15
    sigma = np.full(7, 0.01 * q)
    problems = []
    for _ in range(count):
        d = random_direction(rng, 60.0)
        s, _ = shape("incompressible", normals @ d)
        y = ps + q * s + sigma * rng.standard_normal(7)
        problems.append((d, y))
    m_true = math.sqrt(2.0 * q / (GAMMA * ps))
    v_true = m_true * math.sqrt(GAMMA * R_AIR * t0 / (1.0 + 0.2 * m_true ** 2))
    err_a, err_v, nfev = [], [], 0
    t_start = time.perf_counter()
    results = []
    for d, y in problems:
        x0 = heuristic_start(y, sigma, normals, "incompressible")
        results.append(solve(y, sigma, normals, "incompressible", x0, tight=False))
    elapsed = time.perf_counter() - t_start
    for (d, _), res in zip(problems, results):
        az, el, ps_e, a_e = res.x
        d_e = direction(az, el)
        err_a.append(math.degrees(math.atan2(np.linalg.norm(np.cross(d_e, d)), d_e @ d)))
        m = mach_from("incompressible", ps_e, a_e)
        v = m * math.sqrt(GAMMA * R_AIR * t0 / (1.0 + 0.2 * m * m))
        err_v.append((v - v_true) / v_true * 100.0)
        nfev += res.nfev
    return {
        "cases": count,
        "scipy_us_per_solve": elapsed / count * 1e6,
        "rms_angle_deg": float(np.sqrt(np.mean(np.square(err_a)))),
        "rms_speed_pct": float(np.sqrt(np.mean(np.square(err_v)))),
        "mean_function_evaluations": nfev / count,
    }


def main():
    if len(sys.argv) == 2 and sys.argv[1] == "--time":
        print(f"{timing(np.random.default_rng(SEED))['scipy_us_per_solve']:.2f}")
        return 0
    rng = np.random.default_rng(SEED)
    cases = []
    cases += make_cases(rng, "incompressible_7port", 7, 40.0, "incompressible", 30, 60.0,
                        101325.0, (0.0838, 0.0838), 0.01)
    cases += make_cases(rng, "incompressible_5port", 5, 45.0, "incompressible", 20, 60.0,
                        101325.0, (0.05, 0.15), 0.01)
    cases += make_cases(rng, "biased_7port", 7, 40.0, "incompressible", 10, 50.0,
                        90000.0, (0.05, 0.2), 0.005, bias_pa=20.0)
    cases += make_cases(rng, "compressible_7port", 7, 40.0, "compressible", 15, 45.0,
                        60000.0, (0.35, 0.55), 0.01)
    cases += make_cases(rng, "supersonic_7port", 7, 40.0, "supersonic", 15, 30.0,
                        20000.0, (1.3, 2.5), 0.01)
    quantiles = []
    for dof in range(1, 7):
        for p in (0.1, 0.05, 0.01, 1e-3, 1e-6, 1e-9):
            quantiles.append({"dof": dof, "upper_tail": p, "x": float(chi2.isf(p, dof))})
    t = timing(rng)
    doc = {
        "meta": {
            "generator": "tests/reference/probe_reference.py",
            "python": platform.python_version(),
            "numpy": np.__version__,
            "scipy": scipy.__version__,
            "seed": SEED,
            "machine": platform.machine(),
        },
        "timing": t,
        "chi2_upper_quantiles": quantiles,
        "cases": cases,
    }
    path = Path(__file__).with_name("probe_cases.json")
    path.write_text(json.dumps(doc, indent=1) + "\n")
    bad = [c["set"] for c in cases if c["scipy"]["status"] <= 0]
    print(f"wrote {path} ({len(cases)} cases, {len(bad)} not converged)")
    print(f"scipy.optimize.least_squares: {t['scipy_us_per_solve']:.1f} us per solve "
          f"({t['cases']} solves, {t['mean_function_evaluations']:.1f} evaluations each), "
          f"rms_angle_deg={t['rms_angle_deg']:.4f} rms_speed_pct={t['rms_speed_pct']:.4f}")
    return 0 if not bad else 1


if __name__ == "__main__":
    sys.exit(main())
