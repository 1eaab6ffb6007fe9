#!/usr/bin/env python3
"""Reference for Cairn's harmonic analysis: H2O at HF/STO-3G with PySCF.

Computes the analytic HF/STO-3G Cartesian Hessian of H2O and PySCF's own harmonic analysis of it
(pyscf.hessian.thermo.harmonic_analysis, translations and rotations projected out), and prints
one JSON object: coordinates (bohr), masses (u), Hessian (Eh/bohr^2, 3N x 3N, atom-major),
frequencies (cm^-1, imaginary as negative numbers) and reduced masses (u).

The geometry is of our own choosing (near the HF/STO-3G minimum: r(OH) 0.989 A, angle 100 deg).
Masses: 16O and 1H isotope masses, the ones Cairn uses (src/elements.rs).
"""
import json
import math
import os

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy
from pyscf import gto, scf
from pyscf.hessian import thermo

r, theta = 0.989, math.radians(100.0)
atoms = [
    ("O", (0.0, 0.0, 0.0)),
    ("H", (r * math.sin(theta / 2), 0.0, r * math.cos(theta / 2))),
    ("H", (-r * math.sin(theta / 2), 0.0, r * math.cos(theta / 2))),
]
mol = gto.M(atom=atoms, basis="sto-3g", unit="Angstrom", verbose=0)
mf = scf.RHF(mol)
mf.conv_tol = 1e-12
mf.kernel()
hess = mf.Hessian().kernel()  # (natm, natm, 3, 3)
natm = mol.natm
h = hess.transpose(0, 2, 1, 3).reshape(3 * natm, 3 * natm)
mass = numpy.array([15.99491461957, 1.00782503223, 1.00782503223])
res = thermo.harmonic_analysis(mol, hess, imaginary_freq=False, mass=mass)
print(
    json.dumps(
        {
            "energy_hartree": float(mf.e_tot),
            "coords_bohr": mol.atom_coords().ravel().tolist(),
            "masses": mass.tolist(),
            "hessian": h.tolist(),
            "frequencies_cm1": [float(x) for x in res["freq_wavenumber"]],
            "reduced_masses": [float(x) for x in res["reduced_mass"]],
        }
    )
)
