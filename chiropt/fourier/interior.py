"""Fields of a solved Fourier stack at any height: in the host, in films and inside the
patterned layers (between and within the particles), from the layers' eigenmodes.

Owns: the plane-wave amplitudes of E and Z H of every harmonic at a height z, and their
sum at in-plane points. Must not import: solve, multipole, fields, metrics, search, store,
report, cli.

Conventions: see ``smatrix`` (e = W (exp(i gamma zeta) a + exp(i gamma (d - zeta)) b),
h = V (exp(i gamma zeta) a - exp(i gamma (d - zeta)) b), zeta measured from the layer's
bottom, lengths scaled by k0); the z components follow from the curl equations,
E_z = -[[eps]]^-1 (Kx h_y - Ky h_x), h_z = Kx E_y - Ky E_x (Moharam et al., J. Opt. Soc.
Am. A 12, 1068 (1995); Liu & Fan, Comput. Phys. Commun. 183, 2233 (2012)). Fields [V/m],
E and h = Z0 H, positions [m]; the Bloch phase exp(i k_par . r) is included.
Inside a patterned layer E_z is the truncated series of a discontinuous field: it
converges away from the side walls, with Gibbs ripples next to them.
"""

from __future__ import annotations

import autograd.numpy as np

from chiropt.fourier.stack import StackSolution, layer_amplitudes, outgoing


def _mv(V, x):
    """Uniform V diagonals (W, 4, M) times amplitudes (W, 2M, C)."""
    M = V.shape[-1]
    ex, ey = x[:, :M], x[:, M:]
    return np.concatenate([V[:, 0][..., None] * ex + V[:, 1][..., None] * ey,
                           V[:, 2][..., None] * ex + V[:, 3][..., None] * ey], axis=1)


def _harmonic_fields(modes, a, b, up_phase, down_phase, Kx, Ky, ezz_inv_scalar=None):
    """E (3 x (W, M, C)) and h of the harmonics from mode amplitudes and their phases."""
    fa = up_phase[..., None] * a
    fb = down_phase[..., None] * b
    if modes.uniform:
        e = fa + fb
        h = _mv(modes.V, fa - fb)
    else:
        e = np.matmul(modes.W, fa + fb)
        h = np.matmul(modes.V, fa - fb)
    M = Kx.shape[-1]
    ex, ey, hx, hy = e[:, :M], e[:, M:], h[:, :M], h[:, M:]
    kx, ky = Kx[..., None], Ky[..., None]
    curl = kx * hy - ky * hx
    if modes.uniform:
        ez = -curl * ezz_inv_scalar[:, None, None]
    else:
        ez = -np.matmul(modes.ezz_inv, curl)
    hz = kx * ey - ky * ex
    return (ex, ey, ez), (hx, hy, hz)


def harmonic_fields_at(sol: StackSolution, bounds, z_interface, z, *, from_above,
                       cache: dict | None = None):
    """Harmonic amplitudes of E and h at height ``z`` [m] for the incoming waves
    ``from_above`` (W, 2M, C) at the top interface.

    ``bounds``: per layer (bottom, top) [m]; ``z_interface``: the top of the last layer;
    ``cache``: a dict keeping each layer's mode amplitudes between calls.
    Returns (E, H), each a tuple of three (W, M, C) arrays.
    """
    cache = {} if cache is None else cache
    st = sol.stack
    k0 = st.k0[:, None]
    if z >= float(_plain(z_interface)) - 1e-18:
        if "above" not in cache:
            cache["above"] = outgoing(sol, from_above=from_above)[0]
        up = cache["above"]
        zeta = (z - z_interface) * k0
        g = sol.above.gamma
        return _harmonic_fields(sol.above, up, from_above, np.exp(1j * g * zeta),
                                np.exp(-1j * g * zeta), sol.Kx, sol.Ky,
                                1.0 / st.eps_above)
    for j, (lo, hi) in enumerate(bounds):
        if float(_plain(lo)) - 1e-18 <= z <= float(_plain(hi)) + 1e-18:
            if j not in cache:
                cache[j] = layer_amplitudes(sol, j, from_above=from_above)
            a, b = cache[j]
            modes = sol.modes[j]
            zeta = (z - lo) * k0
            d = (hi - lo) * k0
            g = modes.gamma
            layer = st.layers[j]
            return _harmonic_fields(modes, a, b, np.exp(1j * g * zeta),
                                    np.exp(1j * g * (d - zeta)), sol.Kx, sol.Ky,
                                    None if layer.inclusions else 1.0 / (layer.eps
                                                                         * np.ones_like(st.k0)))
    raise ValueError(f"height {z!r} m lies below the stack's layers")


def _plain(x):
    from autograd.tracer import getval

    return getval(x)


def point_fields(sol: StackSolution, harmonics, xy):
    """Sum the harmonics at in-plane points ``xy`` (P, 2) [m]: (W, C, P, 3) complex."""
    E, H = harmonics
    k0 = sol.stack.k0[:, None]
    qx, qy = sol.Kx * k0, sol.Ky * k0                       # (W, M) [1/m]
    ph = np.exp(1j * (qx[..., None] * xy[:, 0] + qy[..., None] * xy[:, 1]))   # (W, M, P)

    def total(comp):
        return np.stack([np.einsum("wmc,wmp->wcp", c, ph) for c in comp], axis=-1)

    return total(E), total(H)
