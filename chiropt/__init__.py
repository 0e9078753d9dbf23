"""chiropt: chiral near fields of periodic nanoparticle arrays.

Physics conventions (fixed once for the whole package; each one is locked in by a test):

- SI units inside; user-facing lengths and wavelengths in nm, angles in degrees.
- Time dependence ``exp(-i omega t)``; passive media have ``Im(eps) >= 0``.
- The array lies in the xy plane; a substrate (optional) fills ``z < 0``.
- Default illumination comes from the host side travelling towards ``-z``:
  ``k_inc = k (sin t cos f, sin t sin f, -cos t)``.
- Helicity ``+1`` is the circular polarization with positive optical chirality
  ``C = -(eps omega / 2) Im(conj(E) . B)`` (Tang & Cohen, PRL 104, 163901 (2010)).
- Lab-frame Stokes of the in-plane field: ``S0 = |Ex|^2 + |Ey|^2``,
  ``S3 = 2 Im(conj(Ex) Ey)``.
- Normalized dipoles ``P = p / (eps0 eps_host)`` and ``M = Z m`` (both V m);
  magnetic fields are carried as ``Z H`` (V/m), ``Z`` the host wave impedance.

Notebook use::

    import chiropt
    design = chiropt.load_design("configs/quickstart-design.yaml")
    response = chiropt.evaluate(design)
    response.R[:, 0]   # reflectance spectrum for helicity +1
"""

__version__ = "0.1.0"

_LAZY = {
    "Design": "chiropt.design", "design_from_dict": "chiropt.design",
    "load_design": "chiropt.design", "ChiroptError": "chiropt.errors",
    "InputError": "chiropt.errors", "Response": "chiropt.response",
    "evaluate": "chiropt.response",
}

__all__ = [*_LAZY, "__version__"]


def __getattr__(name):
    """Import the public API lazily, so ``import chiropt.errors`` stays light."""
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'chiropt' has no attribute {name!r}")
