#!/usr/bin/python3
"""Checks Holdfast's CUSUM run lengths against an independent method.

Usage: /usr/bin/python3 arl_check.py path/to/arl_probe

The one-sided CUSUM S = max(0, S + z - k), alarm at S > h, z ~ N(mu, 1), has
an average run length L(s) from S = s that solves Page's integral equation
(Page 1954; solved numerically by Goel & Wu 1971):

    L(s) = 1 + L(0) F(k - mu - s) + integral_0^h L(y) f(y + k - mu - s) dy,

F and f the standard normal cdf and pdf (scipy.stats.norm). It is solved here
by the Nystrom method with Gauss-Legendre quadrature on [0, h] (numpy), with
L(0) as an extra unknown; the zero-state ARL is L(0). L is smooth on [0, h],
so the quadrature converges fast: the script checks itself by comparing 64
with 128 nodes (to round-off, see SELF_TOL). The C++ side (holdfast/arl.h)
uses the Brook & Evans (1972) Markov chain, a different discretisation; the
two must agree within 1 %.

Also prints the two-sided values 1/(1/L(mu) + 1/L(-mu)) next to the k = 0.5
table values (Montgomery; NIST/SEMATECH e-Handbook 6.3.2.3; from memory),
for information only.
Exits 1 on any failure.
"""
import subprocess
import sys

import numpy as np
from scipy.stats import norm

MARKOV_TOL = 0.01      # relative, Markov chain (200 states) against the integral equation
# Relative, 64 against 128 quadrature nodes. The quadrature has converged by 32
# nodes; what remains is round-off in the solve, which grows with the ARL
# (I - K is nearly singular when alarms are rare): about 5e-7 at ARL 4e7.
SELF_TOL = 1e-6


def page_arl(h, k, mu, nodes):
    """Zero-state ARL from Page's integral equation, Gauss-Legendre Nystrom."""
    x, w = np.polynomial.legendre.leggauss(nodes)
    y = 0.5 * h * (x + 1.0)
    w = 0.5 * h * w
    s = np.concatenate(([0.0], y))          # unknowns: L(0), L(y_1) .. L(y_n)
    a = np.eye(nodes + 1)
    a[:, 0] -= norm.cdf(k - mu - s)
    a[:, 1:] -= w[None, :] * norm.pdf(y[None, :] + k - mu - s[:, None])
    return np.linalg.solve(a, np.ones(nodes + 1))[0]


def main():
    if len(sys.argv) != 2:
        print(__doc__)
        return 2
    probe = sys.argv[1]
    grid = [(h, k, mu)
            for h in (1.0, 2.0, 3.0, 4.0, 5.0, 8.0)
            for k in (0.25, 0.5, 1.0)
            for mu in (0.0, 0.5, 1.0, 2.0)]
    stdin = "".join("%.17g %.17g %.17g\n" % case for case in grid)
    out = subprocess.run([probe], input=stdin, capture_output=True, text=True, check=True)
    lines = out.stdout.split("\n")
    failures = 0
    worst = 0.0
    print("%5s %5s %5s | %14s %14s %9s | %14s %9s" %
          ("h", "k", "mu", "integral eq.", "Markov", "rel_err", "Siegmund", "rel_err"))
    for (h, k, mu), line in zip(grid, lines):
        fields = line.split()
        markov, siegmund = float(fields[0]), float(fields[1])
        ref = page_arl(h, k, mu, 64)
        ref_fine = page_arl(h, k, mu, 128)
        self_err = abs(ref / ref_fine - 1.0)
        err = abs(markov / ref_fine - 1.0)
        worst = max(worst, err)
        bad = err > MARKOV_TOL or self_err > SELF_TOL or len(fields) != 2
        print("%5.2f %5.2f %5.2f | %14.8g %14.8g %9.2e | %14.8g %9.2e%s" %
              (h, k, mu, ref_fine, markov, err, siegmund, abs(siegmund / ref_fine - 1.0),
               "  FAIL" + (" (reference not converged: %.1e)" % self_err
                           if self_err > SELF_TOL else "") if bad else ""))
        failures += bad
    if len(lines) - 1 != len(grid):
        print("probe printed %d lines for %d cases" % (len(lines) - 1, len(grid)))
        failures += 1

    print("\nTwo-sided, k = 0.5 (integral equation) against the tables (memory):")
    table = {(4.0, 0.0): 168, (4.0, 0.5): 26.6, (4.0, 1.0): 8.38, (4.0, 2.0): 3.34,
             (5.0, 0.0): 465, (5.0, 0.5): 38.0, (5.0, 1.0): 10.4, (5.0, 2.0): 4.01}
    for (h, mu), value in table.items():
        two = 1.0 / (1.0 / page_arl(h, 0.5, mu, 128) + 1.0 / page_arl(h, 0.5, -mu, 128))
        print("  h %.0f mu %.1f: %9.4g  table %g" % (h, mu, two, value))

    print("\nmax relative error Markov vs integral equation: %.3e (tol %g)" % (worst, MARKOV_TOL))
    print("%d of %d cases failed" % (failures, len(grid)))
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
