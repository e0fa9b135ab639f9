#!/usr/bin/env python3
"""Reference circle fits for nav-core's tactile cross-sections.

Writes tests/reference/section_reference.json, read by
tests/tests/section_reference.rs. CI does not run this script; the data file
is committed.

Regenerate (from the workspace root):

    python3 tests/reference/section_reference.py

Time scipy on the example's own point sets (written by
`cargo run --release -p nav-core --example section_accuracy -- --dump FILE`):

    python3 tests/reference/section_reference.py --time FILE

Made with: Python 3 (see "versions" in the data file), numpy 2.4.6,
scipy 1.17.1.

How the expected values are computed (independently of the Rust code):

- Kasa (Kasa 1976): numpy.linalg.lstsq on  x^2 + y^2 + B x + C y + D = 0,
  on the raw (uncentred) coordinates.
- Pratt (Pratt 1987) and hyper-accurate (Al-Sharadqah and Chernov 2009):
  the generalised eigenproblem  M a = eta N a  on the raw (uncentred) data,
  M the moment matrix of (z, x, y, 1), solved by scipy.linalg.eig; the
  solution is the eigenvector of the smallest non-negative finite eigenvalue.
  N_Pratt = [[0,0,0,-2],[0,1,0,0],[0,0,1,0],[-2,0,0,0]];
  N_Hyper = 2 N_Taubin - N_Pratt with the uncentred Taubin matrix
  N_Taubin = [[4 zbar, 2 xbar, 2 ybar, 0],[2 xbar,1,0,0],[2 ybar,0,1,0],[0,0,0,0]].
  (The Rust code centres the data and expands det(M - eta N) itself.)
- Geometric (orthogonal distance): scipy.optimize.least_squares, method
  'lm' (MINPACK), residuals |p - c| - r, analytic Jacobian, tolerances
  1e-15, started from the Kasa fit.

Data: the six points of Gander, Golub and Strebel, "Least-squares fitting
of circles and ellipses", BIT 34 (1994), x = 1,2,5,7,9,3; y = 7,6,8,7,5,7
(the points as printed in the paper); and noisy arcs of our own invention
(numpy default_rng, seed below), points stored in the file so the Rust test
fits exactly the same numbers.
"""

import json
import platform
import sys
import time

import numpy as np
import scipy
import scipy.linalg
from scipy.optimize import least_squares

SEED = 20261201
OUT = "tests/reference/section_reference.json"


def kasa(x, y):
    a = np.column_stack([x, y, np.ones_like(x)])
    b = -(x * x + y * y)
    (bb, cc, dd), *_ = np.linalg.lstsq(a, b, rcond=None)
    cx, cy = -bb / 2, -cc / 2
    return cx, cy, float(np.sqrt(cx * cx + cy * cy - dd))


def generalised(x, y, method):
    z = x * x + y * y
    d = np.column_stack([z, x, y, np.ones_like(x)])
    m = d.T @ d / len(x)
    xb, yb, zb = x.mean(), y.mean(), z.mean()
    n_pratt = np.array([[0, 0, 0, -2], [0, 1, 0, 0], [0, 0, 1, 0], [-2, 0, 0, 0]], float)
    n_taubin = np.array(
        [[4 * zb, 2 * xb, 2 * yb, 0], [2 * xb, 1, 0, 0], [2 * yb, 0, 1, 0], [0, 0, 0, 0]]
    )
    n = n_pratt if method == "pratt" else 2 * n_taubin - n_pratt
    w, v = scipy.linalg.eig(m, n)
    best = None
    for k in range(4):
        eta = w[k]
        if not np.isfinite(eta) or abs(eta.imag) > 1e-12 * max(1.0, abs(eta.real)):
            continue
        eta = eta.real
        if eta < -1e-12:
            continue
        if best is None or eta < best[0]:
            best = (eta, np.real(v[:, k]))
    _, a = best
    aa, bb, cc, dd = a
    cx, cy = -bb / (2 * aa), -cc / (2 * aa)
    r = np.sqrt((bb * bb + cc * cc - 4 * aa * dd) / (4 * aa * aa))
    return float(cx), float(cy), float(r)


def geometric(x, y, start, tol=1e-15):
    def res(p):
        return np.hypot(x - p[0], y - p[1]) - p[2]

    def jac(p):
        rho = np.hypot(x - p[0], y - p[1])
        return np.column_stack([-(x - p[0]) / rho, -(y - p[1]) / rho, -np.ones_like(x)])

    sol = least_squares(res, np.array(start), jac=jac, method="lm", xtol=tol, ftol=tol, gtol=tol)
    return float(sol.x[0]), float(sol.x[1]), float(abs(sol.x[2])), float(np.sum(sol.fun**2))


def circ(t):
    return {"cx": t[0], "cy": t[1], "r": t[2]}


def all_fits(x, y):
    k = kasa(x, y)
    g = geometric(x, y, k)
    return {
        "kasa": circ(k),
        "pratt": circ(generalised(x, y, "pratt")),
        "hyper": circ(generalised(x, y, "hyper")),
        "geometric": circ(g),
        "geometric_rss": g[3],
    }


def time_scipy(point_sets):
    """Median-of-5 time per scipy 'lm' geometric fit (xtol = ftol = gtol = 1e-8,
    analytic Jacobian, Kasa start as in the reference fits)."""
    runs = []
    for _ in range(5):
        t0 = time.perf_counter()
        for x, y in point_sets:
            k = kasa(x, y)
            geometric(x, y, k, tol=1e-8)
        runs.append((time.perf_counter() - t0) / len(point_sets))
    return sorted(runs)[2] * 1e6


def main():
    if len(sys.argv) == 3 and sys.argv[1] == "--time":
        sets = []
        with open(sys.argv[2]) as f:
            for line in f:
                v = np.array([float(s) for s in line.split()])
                sets.append((v[0::2], v[1::2]))
        us = time_scipy(sets)
        print(f"scipy_least_squares points={len(sets[0][0])} sets={len(sets)} us_per_fit={us:.1f}")
        return

    ggs_x = np.array([1, 2, 5, 7, 9, 3], float)
    ggs_y = np.array([7, 6, 8, 7, 5, 7], float)
    out = {
        "generator": "tests/reference/section_reference.py",
        "versions": {
            "python": platform.python_version(),
            "numpy": np.__version__,
            "scipy": scipy.__version__,
        },
        "seed": SEED,
        "gander_golub_strebel_1994": dict(
            x=ggs_x.tolist(), y=ggs_y.tolist(), **all_fits(ggs_x, ggs_y)
        ),
        "arcs": [],
    }
    rng = np.random.default_rng(SEED)
    timing_sets = []
    for arc_deg in (60, 90, 120, 180, 360):
        for n in (6, 16, 32):
            for noise_m in (0.001, 0.005):
                for rep in range(2):
                    r = 0.5
                    cx, cy = rng.uniform(-0.2, 0.2, 2)
                    start = rng.uniform(-np.pi, np.pi)
                    span = np.radians(arc_deg)
                    if arc_deg == 360:
                        t = start + span * np.arange(n) / n
                    else:
                        t = start + span * np.arange(n) / (n - 1)
                    x = cx + r * np.cos(t) + rng.normal(0, noise_m, n)
                    y = cy + r * np.sin(t) + rng.normal(0, noise_m, n)
                    case = {
                        "arc_deg": arc_deg,
                        "n": n,
                        "noise_m": noise_m,
                        "true": {"cx": float(cx), "cy": float(cy), "r": r},
                        "points": [[float(a), float(b)] for a, b in zip(x, y)],
                    }
                    case.update(all_fits(x, y))
                    out["arcs"].append(case)
                    if arc_deg == 180 and n == 16 and noise_m == 0.001:
                        timing_sets.append((x, y))
    with open(OUT, "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")
    print(f"wrote {OUT}: {len(out['arcs'])} arcs")
    g = out["gander_golub_strebel_1994"]
    for k in ("kasa", "pratt", "hyper", "geometric"):
        print(f"GGS 1994 {k}: {g[k]}")
    # Timing on freshly generated 16-point 180-degree 1 mm arcs.
    sets = []
    for _ in range(2000):
        t = rng.uniform(-np.pi, np.pi) + np.pi * np.arange(16) / 15
        sets.append(
            (0.5 * np.cos(t) + rng.normal(0, 0.001, 16), 0.5 * np.sin(t) + rng.normal(0, 0.001, 16))
        )
    print(f"scipy_least_squares points=16 arc_deg=180 noise_mm=1 us_per_fit={time_scipy(sets):.1f}")


if __name__ == "__main__":
    main()
