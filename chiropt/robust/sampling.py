"""The sample plan of a robust value: fabrication errors, cone directions, band nodes.

Owns: :class:`SamplePlan` and :func:`make_plan` (plain numbers, no physics). The same seed
gives the same plan, so every design of a run sees the same errors (common random numbers).

- Fabrication: ``samples`` points of a scrambled Sobol sequence (Owen scrambling, seeded;
  scipy.stats.qmc, Joe & Kuo 2008 direction numbers) in the unit cube of the error terms,
  mapped to independent standard normals by the inverse normal CDF and scaled by each
  term's sigma; a shared term adds its one offset to each of its quantities.
- Cone: directions uniform in solid angle inside the half angle
  ``theta_max = asin(NA / n_host)`` around the design's illumination direction:
  Gauss-Legendre in ``cos(theta)`` on ``[cos(theta_max), 1]`` (exact for polynomials in
  ``cos(theta)`` of degree ``2 P - 1``; Abramowitz & Stegun 1964, 25.4.29) times ``N``
  equally spaced azimuths (the Gauss rule of periodic functions: exact for trigonometric
  polynomials of degree ``< N``), rotated onto the illumination direction.
- Band: a Gaussian weight of full width at half maximum ``B`` (standard deviation
  ``B / (2 sqrt(2 ln 2))``) by Gauss-Hermite nodes (A&S 25.4.46), or a flat weight over
  ``[-B/2, B/2]`` by Gauss-Legendre nodes; offsets [nm] added to every wavelength.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Any

import numpy as onp
from numpy.polynomial.hermite_e import hermegauss
from numpy.polynomial.legendre import leggauss
from scipy.stats import norm, qmc

from chiropt.design import Design
from chiropt.errors import InputError
from chiropt.robust.spec import RobustSpec

__all__ = ["SamplePlan", "band_nodes", "cone_nodes", "make_plan", "normal_samples"]


@dataclass(frozen=True)
class SamplePlan:
    """Everything a robust value is averaged over (plain arrays).

    paths : quantities moved by the errors; offsets (S, P) [user units], one row per sample
    (S = 1 and P = 0 without errors); normals (S, E) the standard-normal draws per term;
    angles_deg (A, 2) polar and azimuth of the cone directions; angle_weights (A,) (sum 1);
    band_offsets_nm (B,); band_weights (B,) (sum 1); seed.
    """

    paths: tuple[str, ...]
    offsets: onp.ndarray
    normals: onp.ndarray
    angles_deg: onp.ndarray
    angle_weights: onp.ndarray
    band_offsets_nm: onp.ndarray
    band_weights: onp.ndarray
    seed: int
    cone: bool

    @property
    def n_samples(self) -> int:
        return int(self.offsets.shape[0])

    def to_dict(self) -> dict[str, Any]:
        """Plain data for the run folder and the full-wave set-up (the same errors there)."""
        return {"seed": self.seed, "paths": list(self.paths),
                "offsets": self.offsets.tolist(), "normals": self.normals.tolist(),
                "angles_deg": self.angles_deg.tolist(),
                "angle_weights": self.angle_weights.tolist(),
                "band_offsets_nm": self.band_offsets_nm.tolist(),
                "band_weights": self.band_weights.tolist()}


def normal_samples(n_terms: int, n_samples: int, seed: int) -> onp.ndarray:
    """(n_samples, n_terms) standard normals from a scrambled Sobol sequence (seeded)."""
    if n_terms == 0:
        return onp.zeros((n_samples, 0))
    sobol = qmc.Sobol(d=n_terms, scramble=True, seed=onp.random.default_rng(seed))
    with warnings.catch_warnings():  # balance properties need 2^m points; any count works
        warnings.simplefilter("ignore", UserWarning)
        u = sobol.random(n_samples)
    return norm.ppf(onp.clip(u, 1e-12, 1.0 - 1e-12))


def cone_nodes(na: float, host_index: float, polar_points: int, azimuth_points: int,
               axis_deg: tuple[float, float] = (0.0, 0.0), origin_deg: float = 0.0):
    """Directions (A, 2) [deg: polar, azimuth] and weights (A,) of the cone quadrature.

    ``na = 0`` gives the axis itself with weight 1. Weights are proportional to solid angle.
    """
    if na <= 0.0:
        return onp.array([axis_deg], float), onp.ones(1)
    theta_max = math.asin(na / host_index)
    x, w = leggauss(polar_points)
    c0 = math.cos(theta_max)
    mu = 0.5 * (1.0 - c0) * x + 0.5 * (1.0 + c0)       # cos(theta) nodes on [c0, 1]
    phi = onp.deg2rad(origin_deg) + 2 * math.pi * onp.arange(azimuth_points) / azimuth_points
    mu_g, phi_g = onp.meshgrid(mu, phi, indexing="ij")
    wts = onp.repeat(w[:, None] / w.sum(), azimuth_points, axis=1) / azimuth_points
    s = onp.sqrt(1.0 - mu_g ** 2)
    v = onp.stack([s * onp.cos(phi_g), s * onp.sin(phi_g), mu_g], -1).reshape(-1, 3)
    t0, p0 = onp.deg2rad(axis_deg[0]), onp.deg2rad(axis_deg[1])
    ry = onp.array([[math.cos(t0), 0, math.sin(t0)], [0, 1, 0],
                    [-math.sin(t0), 0, math.cos(t0)]])
    rz = onp.array([[math.cos(p0), -math.sin(p0), 0], [math.sin(p0), math.cos(p0), 0],
                    [0, 0, 1]])
    d = v @ (rz @ ry).T
    polar = onp.rad2deg(onp.arccos(onp.clip(d[:, 2], -1.0, 1.0)))
    azimuth = onp.rad2deg(onp.arctan2(d[:, 1], d[:, 0]))
    return onp.stack([polar, azimuth], -1), wts.reshape(-1)


def band_nodes(band_nm: float, shape: str, points: int):
    """Wavelength offsets (B,) [nm] and weights (B,) of the band quadrature."""
    if band_nm <= 0.0:
        return onp.zeros(1), onp.ones(1)
    if shape == "gaussian":
        x, w = hermegauss(points)
        sigma = band_nm / (2.0 * math.sqrt(2.0 * math.log(2.0)))
        return sigma * x, w / w.sum()
    x, w = leggauss(points)
    return 0.5 * band_nm * x, w / w.sum()


def make_plan(spec: RobustSpec, design: Design, seed: int) -> SamplePlan:
    """The plan of ``spec`` for ``design`` (its illumination direction is the cone axis)."""
    ill = design.illumination
    if spec.na > 0 and ill.side != "host":
        raise InputError("illumination.side", "a cone average (na > 0) needs illumination "
                                              "from the host side (its NA is in the host)")
    paths: list[str] = [p for e in spec.errors for p in e.paths]
    if spec.errors:
        z = normal_samples(len(spec.errors), spec.samples, seed)
        cols = [z[:, k] * e.sigma for k, e in enumerate(spec.errors) for _ in e.paths]
        offsets = onp.stack(cols, -1)
    else:
        z, offsets = onp.zeros((1, 0)), onp.zeros((1, 0))
    angles, aw = cone_nodes(spec.na, design.host_index, spec.polar_points, spec.azimuth_points,
                            (ill.polar_deg, ill.azimuth_deg), spec.azimuth_origin_deg)
    bo, bw = band_nodes(spec.band_nm, spec.band_shape, spec.band_points)
    return SamplePlan(paths=tuple(paths), offsets=offsets, normals=z, angles_deg=angles,
                      angle_weights=aw, band_offsets_nm=bo, band_weights=bw, seed=int(seed),
                      cone=spec.na > 0)
