#!/usr/bin/env python3
"""Colebrook-White Darcy friction factors from the `fluids` package.

Writes colebrook_reference.csv (columns: reynolds, relative_roughness,
darcy_friction_factor), read by tests/tests/sim_friction.rs.

Regenerate from the repository root:

    python3 tests/reference/colebrook_reference.py

Made with: Python 3 (see the csv header line for the exact versions),
fluids 1.3.1 (fluids.friction.Colebrook, which solves the implicit
Colebrook (1939) equation exactly via the Lambert W function).
"""
import os
import platform

import fluids
from fluids.friction import Colebrook

REYNOLDS = [4.0e3, 1.0e4, 3.0e4, 1.0e5, 3.0e5, 1.0e6, 1.0e7, 1.0e8]
ROUGHNESS = [0.0, 1.0e-6, 1.0e-5, 1.0e-4, 1.0e-3, 1.0e-2, 5.0e-2]

here = os.path.dirname(os.path.abspath(__file__))
path = os.path.join(here, "colebrook_reference.csv")
with open(path, "w", encoding="ascii") as f:
    f.write(
        "# fluids %s, Python %s; fluids.friction.Colebrook(Re, eD)\n"
        % (fluids.__version__, platform.python_version())
    )
    f.write("reynolds,relative_roughness,darcy_friction_factor\n")
    for re in REYNOLDS:
        for ed in ROUGHNESS:
            f.write("%.6e,%.6e,%.17e\n" % (re, ed, Colebrook(re, ed)))
print("wrote", path)
