"""The robustness figure of one design: error distributions and spectra around it.

Owns: :func:`plot_robustness` (one PNG per design: per metric, the Monte Carlo histogram
with the first-order normal curve, the nominal, cone and band values; below it, the
metric's spectrum around the design wavelength with the band and its width).
Must not import: search, store, cli.
"""

from __future__ import annotations

from pathlib import Path

import numpy as onp

from chiropt.report.style import PALETTE, new_figure, save

__all__ = ["plot_robustness"]


def _colour(metric: str) -> str:
    return PALETTE.get(metric.rstrip("+-1") if metric[-2:] in ("+1", "-1") else metric, "0.3")


def plot_robustness(result: dict, path: str | Path, title: str = "") -> Path:
    """Draw ``result`` of ``chiropt.robust.analysis.analyse`` into ``path`` (PNG)."""
    metrics = list(result["metrics"])
    scan = result.get("scan")
    rows = 2 if scan is not None else 1
    fig, axes = new_figure(rows, len(metrics), width=3.4, height=2.8)
    em = result["error_model"]
    for j, m in enumerate(metrics):
        r, ax, col = result["metrics"][m], axes[0, j], _colour(m)
        if m in result.get("samples", {}):
            vals = onp.asarray(result["samples"][m], float)
            ax.hist(vals, bins=max(8, int(onp.sqrt(vals.size))), density=True, color=col,
                    alpha=0.45, label="Monte Carlo")
            fo = r["first_order"]
            if fo["std"] > 0:
                x = onp.linspace(min(vals.min(), fo["p5"] - fo["std"]),
                                 max(vals.max(), fo["p95"] + fo["std"]), 200)
                pdf = onp.exp(-0.5 * ((x - fo["mean"]) / fo["std"]) ** 2) / (
                    fo["std"] * onp.sqrt(2 * onp.pi))
                ax.plot(x, pdf, color="0.2", linewidth=1.0,
                        label=f"first order ({r['agreement']['first_order']})")
            for p, ls in (("p5", ":"), ("p95", ":")):
                ax.axvline(r["monte_carlo"][p], color=col, linestyle=ls, linewidth=0.9)
        ax.axvline(r["nominal"], color="0.0", linewidth=1.2, label="nominal")
        for kind, ls in (("cone", "--"), ("band", "-.")):
            if kind in r:
                ax.axvline(r[kind], color="0.45", linestyle=ls, linewidth=1.0,
                           label=f"{kind} average")
        ax.set_xlabel(m)
        ax.set_title(f"{m} at {result['at_nm']:g} nm", loc="left")
        ax.legend(loc="best")
        if scan is not None:
            ax2 = axes[1, j]
            ax2.plot(scan["wavelength_nm"], scan[m], color=col, linewidth=1.4)
            ax2.axvline(result["at_nm"], color="0.0", linewidth=0.8)
            if em["band_nm"] > 0:
                half = 0.5 * em["band_nm"]
                ax2.axvspan(result["at_nm"] - half, result["at_nm"] + half, color="0.85",
                            label=f"band {em['band_nm']:g} nm")
            w = r.get("fwhm_nm")
            ax2.set_title(f"width {w:.3g} nm" if w is not None and onp.isfinite(w)
                          else "width beyond the scan", loc="left")
            ax2.set_xlabel("vacuum wavelength (nm)")
            ax2.set_ylabel(m)
    if title:
        fig.suptitle(title, x=0.01, ha="left")
    path = Path(path)
    save(fig, path)
    return path
