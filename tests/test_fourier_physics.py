"""What is known of the near fields of disk arrays, reproduced with the Fourier solver.

Qualitative facts of the trade, checked as signs and orderings, never tuned to numbers
(common practice, no source; reported for plasmonic and high-index disk arrays in the
nanophotonics literature): where plasmonic disks concentrate their near field and how
chiral it stays, and the trade-off between chirality (g) and the degree of circular
polarization of the in-plane field (DOCP) above silicon disks.
"""

from __future__ import annotations

import numpy as onp
import pytest
from scipy.stats import spearmanr

from chiropt.design import design_from_dict
from chiropt.fields import cell_grid, field_maps, order_content
from chiropt.metrics import order_metrics, quadratic_maps
from chiropt.model import run_model

HEIGHT_ABOVE = 5.0   # nm above the disk tops, where molecules sit


def _disk_array(material, radius, height, period, wavelengths, harmonics=97):
    return design_from_dict({
        "lattice": {"kind": "square", "period_nm": period},
        "particles": [{"shape": "cylinder", "radius_nm": radius, "height_nm": height,
                       "material": material}],
        "substrate": {"material": {"n": 1.5}}, "gap_nm": 0,
        "illumination": {"wavelength_nm": list(wavelengths)},
        "region": {"kind": "plane", "height_nm": HEIGHT_ABOVE},
        "model": {"solver": "fourier", "harmonics": harmonics}})


def _maps(out, design, n=32):
    sol = out.solution
    height = design.particles[0].height_nm
    E, ZH = field_maps(order_content(sol, (height + HEIGHT_ABOVE) * 1e-9), sol.structure.lattice,
                       n)
    q = {k: onp.asarray(v) for k, v in quadratic_maps(E, ZH).items()}
    xy = cell_grid(sol.structure.lattice.plain(), n) / 1e-9
    period = design.lattice.periods_nm[0]
    wrapped = (xy + 0.5 * period) % period - 0.5 * period   # square lattice, disk at 0
    return onp.asarray(E), q, onp.hypot(wrapped[..., 0], wrapped[..., 1])


@pytest.fixture(scope="module")
def silver():
    d = _disk_array("Ag", 100, 40, 400, onp.arange(650.0, 851.0, 25.0))
    out = run_model(d)
    return d, out, int(onp.argmax(onp.asarray(out.metrics["u"])))


def test_silver_disks_concentrate_an_out_of_plane_field_at_their_edges(silver):
    d, out, w = silver
    assert float(out.metrics["u"][w]) > 1.5                       # enhanced at resonance
    E, q, r = _maps(out, d)
    EE = q["EE"][w, 0]
    i = onp.unravel_index(onp.argmax(EE), EE.shape)
    assert 0.6 * 100 < r[i] < 1.4 * 100                           # at the rim, not the centre
    Ez2 = onp.abs(E[w, 0][..., 2]) ** 2
    assert Ez2[i] > 0.5 * EE[i]                                   # mostly out of plane


def test_silver_disks_near_field_loses_chirality_and_handedness(silver):
    d, out, w = silver
    m = out.metrics
    far = int(onp.argmin(onp.asarray(m["u"])))
    assert abs(float(m["g"][w])) < 0.5 * abs(float(m["g"][far]))  # g nearly vanishes
    _, q, _ = _maps(out, d)
    docp_local = q["S3"][w, 0] / q["S0"][w, 0]
    assert docp_local.min() < 0 < docp_local.max()                # DOCP changes sign
    om = order_metrics(out.solution, d.region)
    ev = onp.asarray(om["evanescent"][w])
    share = onp.where(ev, onp.asarray(om["share"][w]), -1.0)
    top = int(onp.argmax(share))
    assert float(om["docp"]["+1"][w][top]) < 0                    # opposite handedness


@pytest.fixture(scope="module")
def silicon():
    d = _disk_array("Si", 120, 150, 450, onp.arange(650.0, 1001.0, 50.0))
    return d, run_model(d)


def test_silicon_disks_have_a_centred_field_of_one_handedness_without_evanescent_cd(silicon):
    d, out = silicon
    E, q, r = _maps(out, d)
    EE = q["EE"][:, 0]
    centred = EE[:, r < 0.4 * 120].mean(axis=1) / EE.mean(axis=(1, 2))
    w = int(onp.argmax(centred))
    assert centred[w] > 2.0                                       # strongest over the centres
    docp = q["S3"][w, 0] / q["S0"][w, 0] * -1.0                   # sign of the incident's
    strong = EE[w] > onp.percentile(EE[w], 75)
    assert onp.all(docp[strong] > 0)                              # one sign where strong
    assert float(out.metrics["docp"]["+1"][w]) > float(onp.median(out.metrics["docp"]["+1"]))
    om = order_metrics(out.solution, d.region)
    ev = onp.asarray(om["evanescent"])
    share = onp.asarray(om["share"])
    g_ev = (onp.abs(onp.asarray(om["g"])) * share * ev).sum(axis=1) / (share * ev).sum(axis=1)
    assert g_ev[w] == g_ev.min()                                  # almost no evanescent CD


def test_silicon_disks_reach_g_above_one_where_docp_is_poor():
    d = _disk_array("Si", 90, 100, 400, onp.arange(600.0, 901.0, 50.0))
    out = run_model(d)
    g = onp.asarray(out.metrics["g"])
    docp = onp.asarray(out.metrics["docp"]["+1"])
    w = int(onp.argmax(g))
    assert g[w] > 1.0
    assert docp[w] < docp.max()
    om = order_metrics(out.solution, d.region)
    ev = onp.asarray(om["evanescent"][w])
    share = onp.asarray(om["share"][w])
    g_ev = float((onp.asarray(om["g"][w]) * share * ev).sum() / (share * ev).sum())
    assert g_ev > 0.5                                             # strong evanescent CD


def test_cell_averaged_docp_is_high_where_cd_vanishes_over_periods_and_wavelengths():
    G, D = [], []
    for period in (380, 420, 460, 500):
        out = run_model(_disk_array("Si", 110, 130, period, onp.arange(620.0, 1001.0, 30.0),
                                    harmonics=49))
        G += list(onp.asarray(out.metrics["g"]))
        D += list(onp.asarray(out.metrics["docp"]["+1"]))
    G, D = onp.array(G), onp.array(D)
    assert spearmanr(G, D).statistic < 0
    low_cd = onp.abs(G) < onp.percentile(onp.abs(G), 25)
    high_cd = G > onp.percentile(G, 75)
    assert D[low_cd].mean() > D[high_cd].mean()


@pytest.mark.parametrize("material", ["Ag", "Si"])
def test_every_evanescent_order_stays_under_its_cd_bound(material):
    # the bound of a single evanescent plane wave on |g| (docs/theory.md §14)
    d = _disk_array(material, 80, 80, 400, [620.0, 780.0], harmonics=49)
    om = order_metrics(run_model(d).solution, d.region)
    ev = onp.asarray(om["evanescent"])
    g = onp.abs(onp.asarray(om["g"]))
    bound = onp.asarray(om["bound"])
    assert ev.any()
    assert onp.all(g[ev] <= bound[ev] + 1e-9)
