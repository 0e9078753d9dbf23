"""How much of a small evaluation is per-operation dispatch: one kernel, eager and compiled.

Run by hand, where JAX is installed (it is not a dependency of chiropt):
``pip install jax && python benchmarks/jit_probe.py``. Prints figures; asserts nothing.

The kernel is the Mie coefficients a_n, b_n of a sphere and their derivatives in the size
parameter x and the relative index m, at one wavelength and n_max = 4: the same
algorithm as ``chiropt.particles.mie`` (downward ratio recurrence, Bohren & Huffman eq.
4.89; upward Riccati-Bessel recurrence for chi and psi; the numerators of the
``mie_coefficients`` docstring), a few hundred operations on arrays of one element, which
is what most of a one-wavelength chiropt evaluation looks like. Printed: chiropt's eager
numpy values and derivatives (``_sphere_ab_values``), the same algorithm in ``jax.numpy``
run eagerly, and compiled with ``jax.jit`` (values, and values with the forward-mode
derivatives of ``jax.jacfwd``), with the largest difference from chiropt's values.
"""

from __future__ import annotations

import math
import time

import numpy as onp

from chiropt.particles._riccati import downward_start
from chiropt.particles.mie import _sphere_ab_values

from timing import best_cpu_seconds

X, M, N_MAX = 2.3, 3.7 + 0.02j, 4


def _mie_jax(jnp, x, m, n_max: int, n_start_z: int, n_start_x: int):
    """[a, b] (2, n_max) by the algorithm of ``chiropt.particles.mie`` in ``jax.numpy``."""
    z = m * x

    def ratios(z_sq, n_hi, n_start):
        g = -z_sq / (2.0 * n_start + 3.0)
        out = [None] * (n_hi + 1)
        if n_start <= n_hi:
            out[n_start] = g
        for n in range(n_start, 1, -1):
            g = -z_sq / (2.0 * n + 1.0 + g)
            if n - 1 <= n_hi:
                out[n - 1] = g
        return out[1:]

    big_g = ratios(z * z, n_max, n_start_z)
    g_x = ratios(x * x, n_max + 1, n_start_x)
    psi, chi = [jnp.cos(x), jnp.sin(x)], [-jnp.sin(x), jnp.cos(x)]
    for n in range(1, n_max + 2):
        c = (2.0 * n - 1.0) / x
        chi.append(c * chi[-1] - chi[-2])
        upward = c * psi[-1] - psi[-2]
        psi.append(jnp.where(n < x, upward, psi[-1] * x / (2.0 * n + 1.0 + g_x[n - 1])))
    m2 = m * m
    a, b = [], []
    for n in range(1, n_max + 1):
        p0, p1, c0, cm, G = psi[n + 1], psi[n + 2], chi[n + 1], chi[n], big_g[n - 1]
        na = ((n + 1.0) * (1.0 - m2) + G) * p0 + m2 * x * p1
        pa = (n + 1.0 + G + n * m2) * c0 - m2 * x * cm
        nb = G * p0 + x * p1
        pb = (2.0 * n + 1.0 + G) * c0 - x * cm
        a.append(na / (na - 1j * pa))
        b.append(nb / (nb - 1j * pb))
    return jnp.stack([jnp.stack(a), jnp.stack(b)])


def main() -> None:
    try:
        import jax
    except ImportError:
        print("JAX is not installed here: pip install jax (used by this probe only)")
        return
    jax.config.update("jax_enable_x64", True)
    jnp = jax.numpy
    nz = downward_start(N_MAX, abs(M * X))
    nx = downward_start(N_MAX + 1, X)
    x, m = onp.array(X), onp.array(M)

    t_np = best_cpu_seconds(lambda: _sphere_ab_values(x, m, N_MAX), 50)
    t_np_d = best_cpu_seconds(lambda: _sphere_ab_values(x, m, N_MAX, derivative=True), 50)
    ref = _sphere_ab_values(x, m, N_MAX)[0]

    def f(xv, mr, mi):
        return _mie_jax(jnp, xv, mr + 1j * mi, N_MAX, nz, nx)

    args = (jnp.asarray(X), jnp.asarray(M.real), jnp.asarray(M.imag))
    t_eager = best_cpu_seconds(lambda: f(*args).block_until_ready(), 5)
    jf = jax.jit(f)
    t0 = time.process_time()
    jf(*args).block_until_ready()
    compile_f = time.process_time() - t0
    t_jit = best_cpu_seconds(lambda: jf(*args).block_until_ready(), 200)

    def with_derivatives(xv, mr, mi):
        return f(xv, mr, mi), jax.jacfwd(f, argnums=(0, 1, 2))(xv, mr, mi)

    jd = jax.jit(with_derivatives)
    t0 = time.process_time()
    jax.block_until_ready(jd(*args))
    compile_d = time.process_time() - t0
    t_jit_d = best_cpu_seconds(lambda: jax.block_until_ready(jd(*args)), 200)
    err = float(onp.max(onp.abs(onp.asarray(jf(*args)) - ref)) / onp.max(onp.abs(ref)))
    print(f"Mie a_n, b_n of one sphere, one wavelength, n_max {N_MAX} (x {X}, m {M}):")
    print(f"  chiropt, numpy eager:        values {1e6 * t_np:7.1f} us, "
          f"with derivatives {1e6 * t_np_d:7.1f} us")
    print(f"  jax.numpy eager:             values {1e6 * t_eager:7.1f} us")
    print(f"  jax.jit:                     values {1e6 * t_jit:7.1f} us, "
          f"with jacfwd derivatives {1e6 * t_jit_d:7.1f} us "
          f"(compile {compile_f:.2f} s and {compile_d:.2f} s)")
    print(f"  largest relative difference from chiropt's values: {err:.1e}")
    print(f"  eager numpy / compiled: {t_np / t_jit:.0f} x (values), "
          f"{t_np_d / t_jit_d:.0f} x (with derivatives)")
    print(f"  (a shape change recompiles: one compile per n_max and array shape; "
          f"{math.ceil(compile_d / max(t_np_d, 1e-9)):,} eager evaluations' worth)")


if __name__ == "__main__":
    main()
