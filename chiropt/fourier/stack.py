"""A layered periodic structure for the Fourier modal method, solved with S-matrices.

Owns: the description of the stack (semi-infinite media above and below, layers from
bottom to top, each uniform or patterned), its global scattering matrix, the outgoing
plane-wave amplitudes for given incoming ones, and the mode amplitudes inside any layer
(for fields within a patterned layer). Must not import: solve, multipole, fields,
metrics, search, store, report, cli.

Units and conventions: lengths [m], permittivities relative [-] arrays (W,) over the
vacuum wavelengths; Bloch wavevector k_par (W, 2) [1/m]; harmonic j has the in-plane
wavevector k_par + G_j (G_j = m b1 + n b2 from ``harmonics``). Amplitude vectors are
the (E_x, E_y) components [V/m] of each harmonic, stacked (E_x all harmonics, E_y all
harmonics), in the uniform media, up-going ones at the bottom of their medium and
down-going ones at its top: above the stack both refer to the top interface, below it to
the bottom interface (z = 0). See ``smatrix`` for the mode conventions and sources.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import autograd.numpy as np

from chiropt.fourier.harmonics import difference_table
from chiropt.fourier.linalg import solve
from chiropt.fourier.permittivity import layer_matrices, plain_normals
from chiropt.fourier.smatrix import (
    Modes,
    interface,
    local_interface,
    local_star,
    local_star_phase,
    local_to_dense,
    patterned_modes,
    phase,
    phase_star,
    star,
    star_phase,
    uniform_modes,
)
from chiropt.lattice import Lattice, order_wavevectors


@dataclass
class FourierLayer:
    """One z-invariant layer: ``thickness`` [m], background permittivity (W,) and
    inclusions [(shape, eps (W,))] (none: a uniform film)."""

    thickness: Any
    eps: Any
    inclusions: list = field(default_factory=list)


@dataclass
class FourierStack:
    """The structure: lattice [m], vacuum wavenumbers k0 (W,) [1/m], Bloch wavevector
    k_par (W, 2) [1/m], media above / below (W,), layers bottom to top, harmonic indices
    mn (M, 2), factorization ('normal' or 'laurent')."""

    lattice: Lattice
    k0: Any
    k_par: Any
    eps_above: Any
    eps_below: Any
    layers: list
    mn: Any
    factorization: str = "normal"


@dataclass
class StackSolution:
    """The solved stack.

    Kx, Ky : (W, M) normalized in-plane wavevectors [-]
    above, below : Modes of the outer media; modes : per layer
    S : global S-matrix blocks (W, 2M, 2M); lower, upper : per layer, the sections
    below it (bottom medium -> inside the layer's bottom) and above it
    """

    stack: FourierStack
    Kx: Any
    Ky: Any
    above: Modes
    below: Modes
    modes: list
    S: tuple
    lower: list
    upper: list


def _normalized_wavevectors(stack: FourierStack):
    q = order_wavevectors(stack.lattice, stack.k_par, stack.mn)   # (W, M, 2) [1/m]
    k0 = stack.k0[:, None]
    return q[..., 0] / k0, q[..., 1] / k0


def solve_stack(stack: FourierStack, *, interior: bool = False) -> StackSolution:
    """Modes of every layer and the global S-matrix (optionally the partial sections for
    interior fields).

    Parameters
    ----------
    stack : FourierStack
    interior : bool — also keep, for every layer, the sections below and above it

    Returns
    -------
    StackSolution

    References
    ----------
    Moharam et al., J. Opt. Soc. Am. A 12, 1068 (1995) (the eigenproblem); Li, J. Opt.
    Soc. Am. A 13, 1024 (1996) (recursive S-matrix); Liu & Fan, Comput. Phys. Commun.
    183, 2233 (2012) (patterned layers in a plane-wave basis).
    """
    Kx, Ky = _normalized_wavevectors(stack)
    dmn, inverse = difference_table(stack.mn)
    above = uniform_modes(stack.eps_above, Kx, Ky)
    below = uniform_modes(stack.eps_below, Kx, Ky)
    modes = []
    normals_cache: dict = {}
    for layer in stack.layers:
        if not layer.inclusions:
            modes.append(uniform_modes(layer.eps * np.ones_like(stack.k0), Kx, Ky))
            continue
        key = tuple(id(s) for s, _ in layer.inclusions)
        if stack.factorization == "normal" and key not in normals_cache:
            normals_cache[key] = plain_normals(layer.inclusions, stack.lattice, dmn, inverse)
        mats = layer_matrices(layer.eps * np.ones_like(stack.k0), layer.inclusions,
                              stack.lattice, stack.mn, dmn, inverse,
                              factorization=stack.factorization,
                              normals=normals_cache.get(key))
        modes.append(patterned_modes(mats, Kx, Ky))
    sequence = [below] + modes + [above]
    k0 = stack.k0[:, None]
    # S of (bottom medium .. layer j's bottom, just inside) and of (layer j's top .. top);
    # the uniform layers at the bottom are combined harmonic by harmonic (2 x 2 blocks)
    lower = []
    n_local = 0
    while n_local < len(stack.layers) and not stack.layers[n_local].inclusions:
        n_local += 1
    all_uniform = n_local == len(stack.layers)
    M = Kx.shape[-1]
    S = local_interface(sequence[0], sequence[1]) if n_local or all_uniform else None
    for j in range(n_local):
        if interior:
            lower.append(local_to_dense(S))
        S = local_star_phase(S, phase(modes[j], stack.layers[j].thickness * k0)[:, :M])
        if j + 1 < n_local or all_uniform:   # the next interface is still uniform-uniform
            S = local_star(S, local_interface(modes[j], sequence[j + 2]))
    if all_uniform:
        S = local_to_dense(S)
    elif n_local == 0:
        S = interface(sequence[0], sequence[1])
    else:
        S = star(local_to_dense(S), interface(modes[n_local - 1], sequence[n_local + 1]))
    for j in range(n_local, len(stack.layers)):
        if interior:
            lower.append(S)
        S = star_phase(S, phase(modes[j], stack.layers[j].thickness * k0))
        S = star(S, interface(modes[j], sequence[j + 2]))
    upper = []
    if interior:
        T = interface(sequence[-2], sequence[-1])
        upper = [None] * len(stack.layers)
        for j in range(len(stack.layers) - 1, -1, -1):
            upper[j] = T
            if j > 0:
                T = phase_star(phase(modes[j], stack.layers[j].thickness * k0), T)
                T = star(interface(modes[j - 1], modes[j]), T)
    return StackSolution(stack=stack, Kx=Kx, Ky=Ky, above=above, below=below, modes=modes,
                         S=S, lower=lower, upper=upper)


def outgoing(sol: StackSolution, *, from_above=None, from_below=None):
    """Outgoing amplitudes for incoming ones, each (W, 2M, C) (E_x, E_y per harmonic).

    Returns (up_above, down_below): the up-going waves in the medium above (at the top
    interface) and the down-going waves in the medium below (at z = 0).
    """
    S11, S12, S21, S22 = sol.S
    up, down = 0.0, 0.0
    if from_above is not None:
        up = up + np.matmul(S22, from_above)
        down = down + np.matmul(S12, from_above)
    if from_below is not None:
        up = up + np.matmul(S21, from_below)
        down = down + np.matmul(S11, from_below)
    return up, down


def layer_amplitudes(sol: StackSolution, j: int, *, from_above=None, from_below=None):
    """Mode amplitudes (a, b) inside layer j, each (W, 2M, C): a up-going at the layer's
    bottom, b down-going at its top (requires ``solve_stack(..., interior=True)``).

    With L = lower[j] (bottom medium -> inside j's bottom) and U = upper[j] (inside j's
    top -> medium above), and X = exp(i gamma d):
        a = L21 in_below + L22 X b,    b = U11 X a + U12 in_above.
    """
    L11, L12, L21, L22 = sol.lower[j]
    U11, U12, U21, U22 = sol.upper[j]
    modes = sol.modes[j]
    X = np.exp(1j * modes.gamma * sol.stack.layers[j].thickness * sol.stack.k0[:, None])
    n = modes.gamma.shape[-1]
    C = (from_above if from_above is not None else from_below).shape[-1]
    src_a = np.matmul(L21, from_below) if from_below is not None else 0.0
    src_b = np.matmul(U12, from_above) if from_above is not None else 0.0
    # a = src_a + L22 X b ; b = src_b + U11 X a  ->  (I - L22 X U11 X) a = src_a + L22 X src_b
    L22X = L22 * X[:, None, :]
    U11X = U11 * X[:, None, :]
    eye = np.eye(n)
    rhs = src_a + np.matmul(L22X, src_b) * np.ones((1, 1, C))
    a = solve(eye - np.matmul(L22X, U11X), rhs)
    b = src_b + np.matmul(U11X, a)
    return a, b


def uniform_flux(modes: Modes, e, *, down: bool = False):
    """z-directed power flux (W, C) of waves with amplitudes e (W, 2M, C) in a uniform
    medium, in units of 1/(2 Z0) per unit area: Re(E_x h_y* - E_y h_x*) summed over
    harmonics, h = +V e for up-going and -V e for down-going waves (Poynting's theorem;
    positive upward). Evanescent harmonics of a lossless medium carry none."""
    V = modes.V
    M = V.shape[-1]
    ex, ey = e[:, :M], e[:, M:]
    hx = V[:, 0][..., None] * ex + V[:, 1][..., None] * ey
    hy = V[:, 2][..., None] * ex + V[:, 3][..., None] * ey
    if down:
        hx, hy = -hx, -hy
    return np.sum(np.real(ex * np.conj(hy) - ey * np.conj(hx)), axis=1)
