#!/usr/bin/python3
"""Checks Holdfast's water model against python3-iapws (IAPWS-IF97).

Usage: /usr/bin/python3 iapws_check.py path/to/fluid_probe

Runs the probe over a grid of P 0.1 .. 20 MPa and T 275 .. 360 K (liquid,
IAPWS-IF97 Region 1) and compares density, isothermal compressibility and
volumetric thermal expansion with iapws.IAPWS97. Exits 1 on any failure.

Units in iapws: P in MPa, rho in kg/m3, xkappa (isothermal compressibility)
in 1/MPa, alfav (cubic expansion) in 1/K. Note that iapws' `kappas` is the
adiabatic compressibility, not the isothermal one.
"""
import subprocess
import sys

from iapws import IAPWS97

RHO_TOL = 1e-6      # relative
KAPPA_TOL = 1e-4    # relative
BETA_TOL = 1e-4     # relative


def main():
    if len(sys.argv) != 2:
        print(__doc__)
        return 2
    probe = sys.argv[1]
    pressures_mpa = [0.1, 1.0, 3.0, 7.0, 12.0, 20.0]
    temperatures_k = [275.0, 293.15, 310.0, 335.0, 360.0]
    grid = [(p, t) for p in pressures_mpa for t in temperatures_k]
    stdin = "".join("water %.17g %.17g\n" % (p * 1e6, t) for p, t in grid)
    out = subprocess.run([probe], input=stdin, capture_output=True, text=True, check=True)
    lines = out.stdout.split("\n")
    failures = 0
    worst = {"rho": 0.0, "kappa": 0.0, "beta": 0.0}
    print("%8s %8s | %14s %10s | %14s %10s | %14s %10s" %
          ("P_MPa", "T_K", "rho", "rel_err", "kappa_1/Pa", "rel_err", "beta_1/K", "rel_err"))
    for (p, t), line in zip(grid, lines):
        fields = line.split()
        rho, kappa, beta = (float(x) for x in fields[:3])
        ref = IAPWS97(P=p, T=t)
        if ref.region != 1:
            print("P %g MPa T %g K: iapws region %s, expected 1" % (p, t, ref.region))
            failures += 1
            continue
        ref_rho = ref.rho
        ref_kappa = ref.xkappa * 1e-6   # 1/MPa -> 1/Pa
        ref_beta = ref.alfav
        err = {
            "rho": abs(rho / ref_rho - 1.0),
            "kappa": abs(kappa / ref_kappa - 1.0),
            "beta": abs(beta / ref_beta - 1.0),
        }
        bad = (err["rho"] > RHO_TOL or err["kappa"] > KAPPA_TOL or err["beta"] > BETA_TOL
               or len(fields) > 3)
        for k in worst:
            worst[k] = max(worst[k], err[k])
        print("%8.3f %8.2f | %14.9f %10.2e | %14.7e %10.2e | %14.7e %10.2e%s" %
              (p, t, rho, err["rho"], kappa, err["kappa"], beta, err["beta"],
               "  FAIL" if bad else ""))
        failures += bad
    if len(lines) - 1 != len(grid):
        print("probe printed %d lines for %d states" % (len(lines) - 1, len(grid)))
        failures += 1
    print("max relative error: rho %.3e (tol %g), kappa %.3e (tol %g), beta %.3e (tol %g)" %
          (worst["rho"], RHO_TOL, worst["kappa"], KAPPA_TOL, worst["beta"], BETA_TOL))
    print("%d of %d states failed" % (failures, len(grid)))
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
