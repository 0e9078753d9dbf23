"""Cost and accuracy of the EBCM T-matrices (chiropt.particles.ebcm).

Run by hand: ``python benchmarks/ebcm.py``. For a silicon-like nanodisk (cylinder) and a
spheroid in water, 20 wavelengths 500-900 nm, prints milliseconds per wavelength point
at lmax 2-4 with the default internal orders, the lossless-identity residual
max|T + T^† + 2 T^† T| on the full internal order, and the change of the lmax = 2
T-matrix when n_max is raised by 8 (convergence).
"""

import time

import numpy as np

from chiropt.particles.ebcm import cylinder_tmatrix, default_orders, spheroid_tmatrix

NM = 1e-9


def best_of(fn, repeat=3):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def unitarity(T):
    Td = np.conj(np.swapaxes(T, -1, -2))
    return np.abs(T + Td + 2 * Td @ T).max()


def main():
    wl = np.linspace(500, 900, 20) * NM
    n_host = 1.33
    k = 2 * np.pi * n_host / wl
    m = np.full(wl.shape, 3.7 / n_host + 0j)
    cases = {
        "cylinder r=100 h=120 nm": (cylinder_tmatrix, (100 * NM, 120 * NM)),
        "spheroid a=100 c=60 nm": (spheroid_tmatrix, (100 * NM, 60 * NM)),
        "spheroid a=60 c=120 nm": (spheroid_tmatrix, (60 * NM, 120 * NM)),
    }
    for name, (fn, dims) in cases.items():
        for lmax in (2, 3, 4):
            t = best_of(lambda fn=fn, dims=dims, lmax=lmax: fn(k, m, *dims, lmax))
            print(f"{name:26s} lmax={lmax}: {1e3 * t / len(wl):7.2f} ms/wavelength")
        x = float(k.max() * max(dims))
        nmax = default_orders(x, 2, max(dims) / min(dims))[0]
        if fn is cylinder_tmatrix:
            nmax += 8
        T_full = fn(k[:3], m[:3], *dims, nmax, nmax=nmax)
        T0 = fn(k, m, *dims, 2)
        T1 = fn(k, m, *dims, 2, nmax=nmax + 8)
        print(f"{name:26s} n_max={nmax}: lossless residual {unitarity(T_full):.1e}, "
              f"change with n_max+8 {np.abs(T1 - T0).max():.1e}")


if __name__ == "__main__":
    main()
