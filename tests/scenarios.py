"""Small goal texts of our own shared by the run, process, Dask and robustness tests.

A silicon sphere array on glass at 700 nm, the near field in a plane 10 nm above the
sphere tops, and a two-variable box (radius, period); each test adds its objectives,
search settings and model.
"""

SPHERE_ON_GLASS = """\
design:
  lattice: {kind: square, period_nm: 420}
  particles:
    - {radius_nm: 75, material: Si}
  substrate: {material: SiO2}
  illumination: {wavelength_nm: 700}
  region: {kind: plane, height_nm: 10}
"""

DIPOLES = "  model: {lmax: 1}\n"

RADIUS_AND_PERIOD = """\
variables:
  particles[0].radius_nm: {min: 50, max: 110}
  lattice.period_nm: {min: 300, max: 520}
"""
