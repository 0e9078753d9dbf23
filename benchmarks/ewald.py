"""Speed of the Ewald lattice dyadics (run by hand: python benchmarks/ewald.py).

Case of the brief: square lattice, period 400 nm, host n = 1.0, 71 wavelengths
550-900 nm, one particle per cell (d = 0), normal incidence. Prints the time per
wavelength point for the forward evaluation and for forward + reverse-mode gradient
w.r.t. the period, at several tolerances.
"""

import time

import autograd.numpy as anp
import numpy as np
from autograd import grad

from chiropt.lattice import Lattice, lattice_green_dyadics


def best_time(fn, repeat=7, number=10):
    fn()
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        for _ in range(number):
            fn()
        times.append((time.perf_counter() - t0) / number)
    return min(times)


def main():
    period = 400e-9
    wavelengths = np.linspace(550e-9, 900e-9, 71)
    k = 2 * np.pi * 1.0 / wavelengths
    k_par = np.zeros((k.size, 2))
    d = np.zeros((1, 3))
    print(f"{'tol':>8} {'forward [ms/pt]':>16} {'fwd+grad [ms/pt]':>17}")
    for tol in (1e-6, 1e-8, 1e-10, 1e-12):
        def forward(tol=tol):
            return lattice_green_dyadics(k, k_par, Lattice.square(period), d, tol=tol)

        def scalar(a, tol=tol):
            S, c = lattice_green_dyadics(k, k_par, Lattice.square(a), d, tol=tol)
            return anp.sum(anp.abs(S) ** 2) + anp.sum(anp.abs(c) ** 2)

        t_f = best_time(forward)
        t_g = best_time(lambda: grad(scalar)(period), repeat=3, number=5)
        print(f"{tol:8.0e} {1e3 * t_f / k.size:16.4f} {1e3 * t_g / k.size:17.4f}")


if __name__ == "__main__":
    main()
