"""Spectrum plots of far-field quantities (R, T, A per helicity).

Owns: drawing a Response's spectra to PNG. Must not import: search, store, cli.
"""

from __future__ import annotations

from pathlib import Path

from chiropt.anomalies import rayleigh_wavelengths_nm
from chiropt.report.style import HELICITY_LABEL, HELICITY_STYLE, PALETTE, new_figure, save


def plot_far_field(response, path: str | Path) -> Path:
    """Plot R, T, A against wavelength for both helicities; mark Rayleigh anomalies."""
    wl = response.wavelength_nm
    fig, axes = new_figure()
    ax = axes[0, 0]
    for name in ("R", "T", "A"):
        data = getattr(response, name)
        for col, h in enumerate((+1, -1)):
            ax.plot(wl, data[:, col], color=PALETTE[name], linestyle=HELICITY_STYLE[h],
                    linewidth=1.4, label=f"{name}, {HELICITY_LABEL[h]}")
    lo, hi = float(wl.min()), float(wl.max())
    for lam, label in rayleigh_wavelengths_nm(response.design):
        if lo <= lam <= hi:
            ax.axvline(lam, color="0.6", linewidth=0.7, linestyle=":")
            ax.text(lam, 0.5, label, rotation=90, fontsize=6, color="0.4", ha="right",
                    va="center")
    ax.set_xlabel("vacuum wavelength (nm)")
    ax.set_ylabel("power fraction (-)")
    ax.set_ylim(-0.02, 1.12)
    if len(wl) == 1:
        ax.set_xlim(lo - 1, hi + 1)
    title = response.design.name or "array"
    ax.set_title(f"{title}: reflectance, transmittance, absorptance", loc="left")
    ax.legend(ncol=3, loc="upper center", bbox_to_anchor=(0.5, -0.18))
    path = Path(path)
    save(fig, path)
    return path
