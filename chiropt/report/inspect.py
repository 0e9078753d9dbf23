"""The near-field inspection sheet of one design at one wavelength (``chiropt inspect``).

Owns: four figures a researcher reads — local maps of u, g and DOCP over the unit cell,
spectra of u, g and DOCP, the diffraction orders' shares with their g and DOCP, and the
orders in the (DOCP, g) plane with each order's attainable region and bound.
Must not import: search, store, cli.

Colour maps: ``cividis`` (monotonic lightness, readable in greyscale and by colour-blind
readers) for every map; signed quantities get a zero contour so their sign survives
greyscale printing.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as onp

from chiropt.report.style import HELICITY_LABEL, HELICITY_STYLE, PALETTE, new_figure, save

MAP = "cividis"


def inspect_design(design, at_nm: float, out_dir: str | Path, *, grid: int = 64,
                   notes: list[str] | None = None,
                   findings: list[str] | None = None) -> list[Path]:
    """Draw the inspection figures of ``design`` (which must have a region) at ``at_nm``.

    Returns the list of PNG paths written; the model's warnings (validity of the model,
    as ``chiropt evaluate`` prints them) are appended to ``notes`` when given, and the
    line naming the limit that holds the CD back at ``at_nm`` (docs/theory.md §18) to
    ``findings``.
    """
    from chiropt.fields import representative_plane_nm
    from chiropt.metrics import order_table, plane_maps
    from chiropt.response import evaluate
    from chiropt.model import maps_tolerance, metrics_tolerance, run_model

    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    from chiropt.design import file_safe_name

    stem = file_safe_name(design.name or "design")
    region = design.region
    tol = metrics_tolerance(design)
    response = evaluate(design)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        sol = run_model(design.with_wavelengths([at_nm]), warn=True, maps=True).solution
    if notes is not None:
        if design.name and stem != design.name:
            notes.append(f"file names use {stem!r} for the design name {design.name!r} (only "
                         "ASCII letters, digits and ._+- are kept in file names)")
        for note in list(response.warnings) + [str(w.message) for w in caught]:
            if note not in notes:
                notes.append(note)
    z_nm = representative_plane_nm(sol.structure, region)
    maps = plane_maps(sol, z_nm, grid, tol=maps_tolerance(design))
    table = order_table(sol, region, 0, tol=tol)
    if findings is not None and not region.inside_layer:
        from chiropt.metrics import region_metrics
        from chiropt.response import capacity_spectra

        cap = capacity_spectra(region_metrics(sol, region, tol=tol, area_grid=0))
        findings.append(f"at {at_nm:g} nm: g = g_00 + g_prop + g_ev = {cap['g_00'][0]:.4g} + "
                        f"{cap['g_prop'][0]:.4g} + {cap['g_ev'][0]:.4g}; "
                        f"{cap['verdict'][0]}")
    spectra = "spectra" if stem.endswith("near-field") else "near-field-spectra"
    paths = [
        _plot_maps(maps, design, at_nm, z_nm, out_dir / f"{stem}-maps-{at_nm:g}nm.png"),
        _plot_spectra(response, at_nm, out_dir / f"{stem}-{spectra}.png"),
        _plot_order_shares(table, at_nm, out_dir / f"{stem}-orders-{at_nm:g}nm.png"),
        _plot_order_plane(table, at_nm, out_dir / f"{stem}-orders-plane-{at_nm:g}nm.png"),
    ]
    return paths


def _cell_outline(ax, design):
    from chiropt.design import lattice_vectors_nm

    a1, a2 = lattice_vectors_nm(design.lattice)
    corners = onp.array([[0, 0], a1, a1 + a2, a2, [0, 0]])
    ax.plot(corners[:, 0], corners[:, 1], color="white", linewidth=0.8)
    for part in design.particles:
        for i in (0, 1):
            for j in (0, 1):  # the particle and its images at the cell corners
                centre = onp.asarray(part.position_nm) + i * a1 + j * a2
                for patch in _footprint(part, centre):
                    ax.add_patch(patch)
    xs, ys = corners[:, 0], corners[:, 1]
    ax.set_xlim(xs.min(), xs.max())
    ax.set_ylim(ys.min(), ys.max())


def _footprint(part, centre):
    """Dotted outline patches of a particle's cross-section at ``centre`` [nm]."""
    import math

    from matplotlib.patches import Circle, Ellipse, Polygon

    from chiropt.fourier.shapes import Rectangle

    style = {"fill": False, "color": "white", "linestyle": ":", "linewidth": 0.8}
    angle = part.angle_deg or 0.0
    if part.shape == "elliptic_cylinder":
        return [Ellipse(centre, 2 * part.radius_nm, 2 * part.radius_b_nm, angle=angle, **style)]
    if part.shape == "box":   # the same outline the solver uses (lengths in nm here)
        box = Rectangle(part.size_nm[0], part.size_nm[1], angle=math.radians(angle),
                        centre=tuple(centre), corner_radius=part.corner_radius_nm or 0.0)
        return [Polygon(onp.asarray(box.vertices), closed=True, **style)]
    out = [Circle(centre, part.radius_nm, **style)]
    if part.shape == "ring":
        out.append(Circle(centre, part.inner_radius_nm, **style))
    return out


def _plot_maps(maps, design, at_nm, z_nm, path):
    x, y = onp.asarray(maps["x_nm"]), onp.asarray(maps["y_nm"])
    panels = [("u", onp.asarray(maps["u"])[0], "intensity enhancement u (-)", False),
              ("g", onp.asarray(maps["g"])[0], "CD enhancement g (-)", True),
              ("docp", onp.asarray(maps["docp"]["+1"])[0], "DOCP, helicity +1 (-)", True)]
    fig, axes = new_figure(1, 3, width=3.6, height=3.3)
    for ax, (_, data, label, signed) in zip(axes[0], panels, strict=True):
        # periodic wrap so the map tiles the closed cell
        xs, ys, ds = (onp.pad(a, ((0, 1), (0, 1)), mode="wrap") for a in (x, y, data))
        xs = xs + onp.pad(onp.zeros_like(x), ((0, 1), (0, 1)))
        a1x, a2 = x[1, 0] * x.shape[0], (x[0, 1] * x.shape[1], y[0, 1] * y.shape[1])
        xs[-1, :] += a1x
        xs[:, -1] += a2[0]
        ys[:, -1] += a2[1]
        mesh = ax.pcolormesh(xs, ys, ds, cmap=MAP, shading="gouraud")
        if signed and onp.nanmin(data) < 0 < onp.nanmax(data):
            ax.contour(xs, ys, ds, levels=[0.0], colors="white", linewidths=1.0,
                       linestyles="--")
        fig.colorbar(mesh, ax=ax, shrink=0.85, label=label)
        _cell_outline(ax, design)
        ax.set_aspect("equal")
        ax.set_xlabel("x (nm)")
        ax.set_ylabel("y (nm)")
        ax.grid(False)
    fig.suptitle(f"{design.name or 'design'}: one unit cell at {at_nm:g} nm, plane "
                 f"z = {z_nm:.0f} nm (dashed white: sign change; dotted: particles)",
                 x=0.01, ha="left", fontsize=10)
    save(fig, path)
    return path


def _plot_spectra(response, at_nm, path):
    m = response.metrics
    wl = response.wavelength_nm
    fig, axes = new_figure(1, 2, width=4.4, height=3.4)
    ax = axes[0, 0]
    ax.plot(wl, m["u"], color=PALETTE["u"], linewidth=1.5, label="u (intensity)")
    ax.plot(wl, m["g"], color=PALETTE["g"], linewidth=1.5, label="g (CD enhancement)")
    ax.axhline(1.0, color="0.6", linewidth=0.7, linestyle=":")
    ax.set_xlabel("vacuum wavelength (nm)")
    ax.set_ylabel("region average (-)")
    ax.legend()
    ax = axes[0, 1]
    for h, key in ((+1, "+1"), (-1, "-1")):
        ax.plot(wl, m["docp"][key], color=PALETTE["docp"], linestyle=HELICITY_STYLE[h],
                linewidth=1.5, label=f"DOCP, {HELICITY_LABEL[h]}")
    ax.axhline(0.0, color="0.6", linewidth=0.7, linestyle=":")
    ax.set_xlabel("vacuum wavelength (nm)")
    ax.set_ylabel("DOCP relative to incident (-)")
    ax.legend()
    for a in axes[0]:
        a.axvline(at_nm, color="0.3", linewidth=0.7, linestyle="--")
    axes[0, 0].set_title("near-field spectra in the region", loc="left")
    save(fig, path)
    return path


def _order_label(row):
    return f"({row['m']},{row['n']})"


def _plot_order_shares(table, at_nm, path, *, top: int = 14):
    rows = sorted(table, key=lambda r: -r["share"])[:top]
    labels = [_order_label(r) for r in rows]
    fig, axes = new_figure(1, 2, width=4.4, height=3.4)
    ax = axes[0, 0]
    pos = onp.arange(len(rows))
    shares = [r["share"] for r in rows]
    hatch = ["" if not r["evanescent"] else "///" for r in rows]
    bars = ax.bar(pos, shares, color=PALETTE["u"], edgecolor="black", linewidth=0.5)
    for b, h in zip(bars, hatch, strict=True):
        b.set_hatch(h)
    ax.set_yscale("log")
    ax.set_xticks(pos, labels, rotation=60, fontsize=7)
    ax.set_ylabel("share of region-averaged U (-)")
    ax.set_title(f"orders at {at_nm:g} nm (hatched: evanescent)", loc="left")
    ax = axes[0, 1]
    ax.plot(pos, [r["g"] for r in rows], "o", color=PALETTE["g"], label="g of the order")
    ax.plot(pos, [r["docp"]["+1"] for r in rows], "s", mfc="none", color=PALETTE["docp"],
            label="DOCP (+1) of the order")
    ax.plot(pos, [r["bound"] if r["bound"] is not None else onp.nan for r in rows], "_",
            color="black", markersize=12, label="CD bound K^2/sqrt(2K^2-1)")
    ax.axhline(0.0, color="0.6", linewidth=0.7, linestyle=":")
    ax.set_xticks(pos, labels, rotation=60, fontsize=7)
    ax.set_ylabel("value (-)")
    ax.legend()
    save(fig, path)
    return path


def _plot_order_plane(table, at_nm, path, *, top: int = 6):
    from chiropt.metrics import attainable_boundary

    rows = [r for r in table if r["evanescent"]]
    rows = sorted(rows, key=lambda r: -r["share"])[:top]
    fig, axes = new_figure(1, 1, width=5.2, height=4.4)
    ax = axes[0, 0]
    shades = onp.linspace(0.15, 0.75, max(len({round(r["K"], 6) for r in rows}), 1))
    seen: dict[float, float] = {}
    groups: dict[tuple, list] = {}
    for r in rows:
        key = (round(r["docp"]["+1"], 9), round(r["g"], 9))
        groups.setdefault(key, []).append(_order_label(r))
    for r in rows:
        K = round(r["K"], 6)
        if K not in seen:
            seen[K] = shades[len(seen)]
            d, g = attainable_boundary(r["K"])
            ax.fill(d, g, color=str(seen[K]), alpha=0.18, linewidth=0)
            ax.plot(d, g, color=str(seen[K]), linewidth=1.0,
                    label=f"attainable, K = {r['K']:.2f}")
            ax.axhline(r["bound"], color=str(seen[K]), linewidth=0.6, linestyle="--")
        ax.plot(r["docp"]["+1"], r["g"], "o", color=PALETTE["g"], mec="black", mew=0.5)
    # labels of points close together are stacked upwards so that they do not overlap
    placed: list[tuple[float, float]] = []
    for (d, g), labels in sorted(groups.items(), key=lambda kv: (kv[0][1], kv[0][0])):
        near = sum(1 for (d0, g0) in placed if abs(d - d0) < 0.08 and abs(g - g0) < 0.08 *
                   max(1.0, abs(g)))
        placed.append((d, g))
        ax.annotate(" ".join(labels), (d, g), fontsize=7, xytext=(4, 4 + 9 * near),
                    textcoords="offset points")
    ax.axhline(0.0, color="0.6", linewidth=0.6)
    ax.axvline(0.0, color="0.6", linewidth=0.6)
    ax.set_xlabel("DOCP of the order, helicity +1 (-)")
    ax.set_ylabel("CD enhancement g of the order (-)")
    ax.set_title(f"strongest evanescent orders at {at_nm:g} nm (dashed: CD bound)", loc="left")
    ax.legend(loc="lower left", fontsize=7)
    save(fig, path)
    return path

