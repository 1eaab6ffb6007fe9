#!/usr/bin/env python3
"""Independent GFN-xTB reference: energy and gradient from the tblite library (pip `tblite`).

Reads one JSON object on stdin:
  {"numbers": [8, 1, 1], "positions_bohr": [[x, y, z], ...], "charge": 0, "uhf": 0,
   "method": "GFN2-xTB", "accuracy": 1.0, "etemp_kelvin": 300.0}
and prints one JSON object: {"energy": Eh, "gradient": [[dE/dx, dE/dy, dE/dz], ...] (Eh/bohr)}.
"""
import json
import sys

import numpy as np
from tblite.interface import Calculator

# K -> Eh, as documented in tblite.interface.Calculator.set ("temperature").
KELVIN_TO_HARTREE = 3.166808578545117e-6


def main():
    req = json.load(sys.stdin)
    calc = Calculator(
        req.get("method", "GFN2-xTB"),
        np.array(req["numbers"], dtype=int),
        np.array(req["positions_bohr"], dtype=float),
        charge=float(req.get("charge", 0)),
        uhf=int(req.get("uhf", 0)),
    )
    calc.set("verbosity", 0)
    calc.set("accuracy", float(req.get("accuracy", 1.0)))
    calc.set("temperature", float(req.get("etemp_kelvin", 300.0)) * KELVIN_TO_HARTREE)
    res = calc.singlepoint()
    print(json.dumps({
        "energy": float(res.get("energy")),
        "gradient": np.asarray(res.get("gradient")).tolist(),
    }))


if __name__ == "__main__":
    main()
