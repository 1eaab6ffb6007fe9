#!/usr/bin/env python3
"""Cairn's PySCF driver (used by adapters/pyscf.yaml): HF or DFT energy, analytic gradient and
analytic Hessian for one geometry.

usage: pyscf_driver.py GEOMETRY.xyz --charge C --spin 2S --method hf|XC --basis B
                       [--cartesian] [--hessian] [--conv-tol T] [--max-cycle N]
                       [--level-shift S] [--grid-level L] [--threads T] [--out result.txt]

Writes OUT:
    energy <Eh>
    gradient            then 3N lines, dE/dx in Eh/bohr, atom-major
    hessian             then 3N lines of 3N numbers, Eh/bohr^2 (only with --hessian)
Exit status: 0 success; 2 SCF not converged (prints SCF_NOT_CONVERGED on stderr);
1 any other error (a Python traceback on stderr).
"""
import argparse
import sys


def main():
    p = argparse.ArgumentParser()
    p.add_argument("xyz")
    p.add_argument("--charge", type=int, default=0)
    p.add_argument("--spin", type=int, default=0, help="2S = number of unpaired electrons")
    p.add_argument("--method", default="hf")
    p.add_argument("--basis", default="sto-3g")
    p.add_argument("--cartesian", action="store_true")
    p.add_argument("--hessian", action="store_true")
    p.add_argument("--conv-tol", type=float, default=1e-10)
    p.add_argument("--max-cycle", type=int, default=100)
    p.add_argument("--level-shift", type=float, default=0.0)
    p.add_argument("--grid-level", type=int, default=3)
    p.add_argument("--threads", type=int, default=1)
    p.add_argument("--out", default="result.txt")
    a = p.parse_args()

    from pyscf import dft, gto, lib, scf

    lib.num_threads(a.threads)
    lines = open(a.xyz).read().splitlines()
    n = int(lines[0].split()[0])
    atoms = []
    for line in lines[2:2 + n]:
        f = line.split()
        atoms.append((f[0], (float(f[1]), float(f[2]), float(f[3]))))
    mol = gto.M(atom=atoms, unit="Angstrom", basis=a.basis, charge=a.charge, spin=a.spin,
                cart=a.cartesian, symmetry=False, verbose=3)
    restricted = a.spin == 0
    if a.method.lower() in ("hf", "scf"):
        mf = scf.RHF(mol) if restricted else scf.UHF(mol)
    else:
        mf = dft.RKS(mol) if restricted else dft.UKS(mol)
        mf.xc = a.method
        mf.grids.level = a.grid_level
    mf.conv_tol = a.conv_tol
    mf.max_cycle = a.max_cycle
    mf.level_shift = a.level_shift
    energy = mf.kernel()
    if not mf.converged:
        print("SCF_NOT_CONVERGED", file=sys.stderr)
        sys.exit(2)
    grad = mf.nuc_grad_method().kernel()  # (natm, 3), Eh/bohr, dE/dx
    with open(a.out + ".tmp", "w") as out:
        out.write("energy %.12f\n" % energy)
        out.write("gradient\n")
        for v in grad.ravel():
            out.write("%.12e\n" % v)
        if a.hessian:
            h = mf.Hessian().kernel()  # (natm, natm, 3, 3), Eh/bohr^2
            h = h.transpose(0, 2, 1, 3).reshape(3 * n, 3 * n)
            out.write("hessian\n")
            for row in h:
                out.write(" ".join("%.12e" % v for v in row) + "\n")
    # Renamed only when complete, so a crash never leaves a plausible partial result.
    import os
    os.replace(a.out + ".tmp", a.out)


if __name__ == "__main__":
    main()
