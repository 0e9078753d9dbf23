"""The goal file: what to optimize, over which design quantities, under which limits.

Owns: parsing and validating a goal file (YAML) into resolved :class:`Goal` records, one per
material; the text printed by ``chiropt goal --explain`` (this docstring); the resolved form
written to ``goal.resolved.yaml``. Must not import: search drivers, store, report, cli
(physics is touched only through ``chiropt.goals.objectives`` for the pre-run checks).

Goal file reference
===================

Every key below is optional unless marked *required*. Lengths and wavelengths in nm, angles
in degrees. Every error names the key path and the line of the goal file.

``name``
    Label of the run; the run folder is ``runs/<name>-<material>/``. Default: the file name.
``description``
    Free text, copied to the resolved goal.
``design`` (*required*)
    The base design, inline exactly as in a design file for ``chiropt evaluate``, or a path
    to a design file (relative to the goal file). Inline errors are reported as ``design.…``.
``materials``
    A material name or a list of them (``[Si, TiO2, GaP]``). The goal is run once per entry;
    each run replaces the (outer) material of every particle (core materials are kept) and
    gets its own run folder, so the fronts can be compared across materials.
``variables`` (*required*)
    ``PATH: {min: LOW, max: HIGH}``, bounds in user units. ``PATH`` is a key path of a
    continuous design quantity, the same names as ``chiropt evaluate --grad``:
    ``particles[0].radius_nm``, ``particles[0].core_radius_nm``,
    ``particles[0].position_nm[0]``, ``lattice.period_nm`` (square, hexagonal) or
    ``lattice.period_nm[0]`` / ``[1]`` (rectangular, oblique), ``lattice.angle_deg``,
    ``gap_nm``, ``layers[0].thickness_nm``, ``host_index``, ``illumination.polar_deg``,
    ``illumination.azimuth_deg``, ``region.height_nm``, ``region.from_nm``,
    ``region.thickness_nm``, ``particles[0].material.n`` / ``.k`` (constant index).
    Short aliases: ``radius_nm`` (single particle), ``period_nm``, ``wavelength_nm``,
    ``polar_deg``, ``height_nm``.
    ``illumination.wavelength_nm`` is special: its value is the operating wavelength, and
    every wavelength the goal uses (``at_nm``, ``band_nm``, the design's own list) moves
    with it by ``value - λ_ref``, where ``λ_ref`` is the design's first wavelength.
``links``
    ``TARGET: SOURCE``: design quantity ``TARGET`` always equals ``SOURCE`` (e.g.
    ``lattice.period_nm[1]: lattice.period_nm[0]``). A target cannot be a variable.
``fixed``
    ``PATH: VALUE``: overrides applied to the base design before anything else.
``objectives`` (*required*, one or two entries)
    ``{maximize: METRIC}`` or ``{minimize: METRIC}`` plus a wavelength spec. Two objectives
    trace a Pareto front. A weighted trade-off of normalized metrics is written
    ``{maximize: {weighted: {g: 0.7, u: 0.3}, normalize: {g: 1.0, u: 10.0}}, at_nm: 700}``
    and means ``sum_i w_i * metric_i / normalize_i`` (normalize defaults to 1).
``constraints``
    A list of
    ``{metric: METRIC, min: LOW, max: HIGH}`` plus a wavelength spec (min and/or max), and
    ``{fabrication: KIND, value: V}`` with KIND one of
    ``min_gap_nm`` (smallest surface-to-surface gap between particles, lattice images
    included; in-plane between footprints for cylinders and spheroids [nm]),
    ``min_feature_nm`` (smallest particle diameter, height, or shell thickness [nm]),
    ``max_aspect_ratio`` (height/diameter of every particle; 1 for spheres).
    Cylinders and spheroids have exact derivatives too (differentiable EBCM), at
    several times the cost of spheres.
    Inside the optimizer a bound ``v >= LOW`` is the scaled inequality
    ``(LOW - v) / max(|LOW|, 1) <= 0``; fabrication limits are scaled by ``V``.
``robust`` (on any objective or metric constraint)
    ``robust: {sigma: {QUANTITY: SIGMA, ...}, na: NA, band_nm: B, band_shape: gaussian | flat,
    statistic: mean | p10 | p90 | worst, samples: N, polar_points: P, azimuth_points: Q,
    band_points: K}``: the term is read as a statistic over fabrication errors, a cone of
    illumination and a band instead of at the nominal design (docs/robustness.md). ``sigma``:
    independent Gaussian errors [user units] of design quantities (key paths as in
    ``variables``; ``A+B`` or a bare last component such as ``radius_nm`` that several paths
    share is one error moving them all together); ``na`` (>= 0, below the host index): the
    incoherent average over a cone of that numerical aperture around the illumination
    direction; ``band_nm`` (0-1000): the average over a Gaussian band of that FWHM (or a flat
    band of that width); ``statistic`` over the N error samples (default mean; ``worst`` is
    the least favourable one: the smallest for a maximized term or a ``min`` bound).
    Defaults: N 64, P 3, Q 4, K 5. The samples are drawn once from ``seed`` (common random
    numbers: every design of the run sees the same errors; written to
    ``robust_samples.json``); the gradients stay exact. Labels become ``p10(g)@700nm``;
    ``front.csv`` adds the nominal value beside each robust objective (``... (nominal)``).
    The exploration screens robust terms at their nominal values.
Wavelength spec (objectives and metric constraints)
    ``at_nm: L`` (one wavelength), or ``band_nm: [L1, L2]`` with ``points: P`` (default 5;
    the band average of P equally spaced wavelengths), or nothing (the average over the
    design's own illumination wavelengths). All wavelengths of a goal are solved in one call.
Metrics
    ``u`` (intensity enhancement), ``c`` (differential chirality enhancement), ``g = c/u``
    (CD enhancement), ``background``, ``docp+1``, ``docp-1``, ``s0+1``, ``s0-1`` (these need a
    ``region`` in the design), ``R+1``, ``R-1``, ``T+1``, ``T-1``, ``A+1``, ``A-1``; and
    ``docp``, ``s0``, ``R``, ``T``, ``A`` for the average of the two incident helicities.
    Where the CD comes from (a region above the particle tops; docs/theory.md §18):
    ``g_00``, ``g_prop``, ``g_ev`` (the parts of g carried by the (0,0), the other
    propagating and the evanescent orders; they add up to g), ``ev_share`` (share of the
    intensity in evanescent orders; ``ev_share+1``, ``ev_share-1`` per helicity),
    ``ev_share_k`` with ``k_min: K`` beside the metric (orders with |q|/k >= K, e.g.
    ``{metric: ev_share_k, k_min: 2.0}`` or ``{maximize: ev_share_k, k_min: 2.0}``),
    ``cd_capacity`` (the largest g_ev that distribution allows), ``cd_efficiency``
    (g_ev / cd_capacity, in [-1, 1]), ``docp_efficiency+1``, ``docp_efficiency-1``,
    ``docp_efficiency`` (in-plane DOCP of the evanescent field, in [-1, 1]).
``search``
    ``algorithm`` (default SLSQP; MMA, SLSQP, L-BFGS, COBYLA, BOBYQA, Subplex, DIRECT-L, CRS2,
    ISRES, ESCH), ``starts`` (number of scrambled-Sobol start points, default 4),
    ``xtol_rel`` (default 1e-6), ``ftol_rel`` (default 1e-8), ``max_evals_per_start``
    (evaluation cap of every local search, default 150), ``front: {method:
    epsilon-constraint | weighted-sum, points: N, reference: {METRIC: V, ...}}`` (two
    objectives only; default epsilon-constraint, 9 points including the two anchors;
    ``reference`` is the hypervolume reference point, one value per objective keyed by its
    metric or its label such as ``g@700nm``; default: the incident plane wave's value of
    each metric, g, c, u, s0 = 1, docp = 0). ``explore: {samples: N, share: F,
    wavelength_points: P, keep: K, batch: B, lmax: L, tolerance: E}``: the global
    exploration that runs before the local searches: N scrambled-Sobol geometries
    (default: the share F, 0.25, of the evaluation budget, divided by K; ``samples: 0``
    switches it off), each solved over
    P values of a wavelength variable (default 21) in one vectorized solve, its K best
    points (default 3; two objectives: spread along the scan's own front) evaluated and
    stored; B geometries per task (default 16); L the multipole order of the scan (default
    the goal's model) and E its accuracy target (default 1e-5, or model.tolerance where that
    is looser); the kept points are always evaluated at the goal's model. The local
    searches start from the best explored feasible designs: ``max(2, starts)`` searches per
    anchor and ``starts`` per epsilon-constraint level, the levels spread along the
    explored front. The reported front is the non-dominated set of every feasible
    evaluation of the run, explored ones included. ``confirm: {model: {...}, polish: N}``:
    after the searches, every front design is solved again with this model section (for
    example ``{solver: fourier, harmonics: auto}``, the rigorous model for disks standing
    on the substrate) and its values are written beside the search model's in front.csv
    (columns ``... (confirmed)``, ``confirm_model``, ``confirm_change``) and marked on
    front.png; with ``polish: N`` the best front design of each objective is improved by
    a local search of at most N iterations in that model (``confirmed.csv`` and
    ``candidates/polished-*.yaml``). ``starts_from: PATH``: the front.csv of an earlier
    run (relative to the goal file; ``{material}`` is replaced by the run's material):
    its rows (in file order, at most ``starts``; values clipped to this goal's bounds;
    every variable of this goal must be a column) are the first local searches' start
    points, the rest are seeded as usual (two objectives: the rows start both anchors).
    This chains stages: stage 1 maximizes, say, ``cd_capacity``, stage 2 maximizes
    ``g`` from stage 1's designs (docs/goals.md §5).
``budget``
    ``wall_time`` (``8h``, ``90m``, ``1h30m``, ``45s`` or a number of seconds) and/or
    ``evaluations`` (a total, split evenly over the local searches so that a run stays
    reproducible). When the wall time runs out the run stops; the same command resumes it.
``seed``
    Seed of the start points and of the stochastic algorithms (default 1). Same goal, same
    seed: same evaluations, same front.
``executor``
    Where the searches run: ``local`` (default: a pool of worker processes on this machine,
    ``--workers`` of them), ``{dask: {address: tcp://HOST:8786}}`` (the workers of a running
    Dask scheduler, on any number of machines) or ``{dask: {local_cluster: {workers: N,
    threads_per_worker: 1}}}`` (a Dask cluster on this machine that the run starts and
    stops; ``executor: dask`` is one with a worker per core). Dask needs the optional extra
    ``chiropt[cluster]``. ``chiropt run --executor`` overrides this key. The executor never
    changes the evaluations: same seed, same store, whatever runs it and however many
    workers there are, so a run may be resumed on another executor.
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from chiropt.design import Design, design_from_dict, file_safe_name, load_design
from chiropt.errors import InputError
from chiropt.robust.spec import RobustSpec, parse_robust
from chiropt.search.algorithms import get_algorithm
from chiropt.capacity import K_MIN_RANGE, ev_share_name, parse_ev_share_name
from chiropt.sensitivity import CAPACITY, FAR_FIELD, NEAR_FIELD
from chiropt.yamlio import Located, check_keys, load_yaml

__all__ = [
    "AVERAGED", "EXPLAIN", "FABRICATION_KINDS", "FRONT_METHODS", "METRIC_NAMES", "Budget",
    "ExecutorSettings", "ExploreSettings", "FabricationConstraint", "Goal", "MetricConstraint",
    "Objective",
    "SearchSettings", "Variable", "WavelengthSpec", "goal_from_dict", "load_goal",
    "parse_executor_option", "parse_wall_time",
]  # fmt: skip

# the user reference only: from its heading on (the module notes above it are for developers)
EXPLAIN = __doc__[__doc__.index("Goal file reference"):].rstrip() + "\n"

AVERAGED = ("docp", "s0", "R", "T", "A", "docp_efficiency")  # helicity averages of +1/-1
EV_SHARE_K = "ev_share_k"  # with k_min: the quantity ev_share_k<k_min>
METRIC_NAMES = FAR_FIELD + NEAR_FIELD + AVERAGED[:5] + CAPACITY + AVERAGED[5:] + (EV_SHARE_K,)
CAPACITY_METRICS = CAPACITY + ("docp_efficiency", EV_SHARE_K)
FABRICATION_KINDS = ("min_gap_nm", "min_feature_nm", "max_aspect_ratio")
FRONT_METHODS = ("epsilon-constraint", "weighted-sum")
WAVELENGTH_PATH = "illumination.wavelength_nm"
ALIASES = {"radius_nm": "particles[0].radius_nm", "period_nm": "lattice.period_nm",
           "wavelength_nm": WAVELENGTH_PATH, "polar_deg": "illumination.polar_deg",
           "height_nm": "region.height_nm"}
TOP_KEYS = {"name", "description", "design", "materials", "variables", "links", "fixed",
            "objectives", "constraints", "search", "budget", "seed", "executor"}
DEFAULT_BAND_POINTS = 5


# ---------------------------------------------------------------------------------------------
# records
# ---------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Variable:
    """A design quantity searched over ``[lower, upper]`` (user units: nm, deg, index)."""

    path: str
    lower: float
    upper: float


@dataclass(frozen=True)
class WavelengthSpec:
    """Where a metric is read: ``kind`` 'at' (one wavelength), 'band' or 'design'.

    ``wavelengths_nm`` are the nominal wavelengths [nm] (before any shift by a wavelength
    variable); the metric is their plain average.
    """

    kind: str
    wavelengths_nm: tuple[float, ...]
    band_nm: tuple[float, float] | None = None

    def label(self) -> str:
        """Short text for column names and plot labels."""
        if self.kind == "at":
            return f"{self.wavelengths_nm[0]:g}nm"
        if self.kind == "band":
            return f"{self.band_nm[0]:g}-{self.band_nm[1]:g}nm"
        return "design-wavelengths"

    def to_dict(self) -> dict:
        if self.kind == "at":
            return {"at_nm": self.wavelengths_nm[0]}
        if self.kind == "band":
            return {"band_nm": list(self.band_nm), "points": len(self.wavelengths_nm)}
        return {}


@dataclass(frozen=True)
class Objective:
    """One objective: ``sense`` 'max' or 'min' of ``sum w * metric / norm`` at ``spec``.

    ``terms`` is a tuple of (metric, weight, normalization); a plain metric is one term
    (metric, 1, 1). ``key`` is its key path in the goal file (``objectives[0]``).
    """

    key: str
    sense: str
    terms: tuple[tuple[str, float, float], ...]
    spec: WavelengthSpec
    weighted: bool = False
    robust: RobustSpec | None = None

    @property
    def metrics(self) -> tuple[str, ...]:
        return tuple(t[0] for t in self.terms)

    def label(self) -> str:
        """Column-safe label, e.g. ``g@700nm``, ``weighted(g:0.7,u:0.3)@650-750nm``, or
        ``p10(g)@700nm`` for a robust objective."""
        if self.weighted:
            body = "weighted(" + ",".join(f"{m}:{w:g}" for m, w, _ in self.terms) + ")"
        else:
            body = self.terms[0][0]
        if self.robust is not None:
            body = f"{self.robust.statistic}({body})"
        return f"{body}@{self.spec.label()}"

    def to_dict(self) -> dict:
        if self.weighted:
            what: Any = {"weighted": {m: w for m, w, _ in self.terms},
                         "normalize": {m: n for m, _, n in self.terms}}
        else:
            what = self.terms[0][0]
        out = {("maximize" if self.sense == "max" else "minimize"): what, **self.spec.to_dict()}
        if self.robust is not None:
            out["robust"] = self.robust.to_dict()
        return out


@dataclass(frozen=True)
class MetricConstraint:
    """``lower <= metric <= upper`` at ``spec`` (either bound may be None)."""

    key: str
    metric: str
    lower: float | None
    upper: float | None
    spec: WavelengthSpec
    robust: RobustSpec | None = None

    def to_dict(self) -> dict:
        out: dict[str, Any] = {"metric": self.metric}
        if self.lower is not None:
            out["min"] = self.lower
        if self.upper is not None:
            out["max"] = self.upper
        out.update(self.spec.to_dict())
        if self.robust is not None:
            out["robust"] = self.robust.to_dict()
        return out

    def label(self) -> str:
        """``u@700nm``, or ``mean(u)@700nm`` when robust (constraint labels start with it)."""
        body = self.metric if self.robust is None else f"{self.robust.statistic}({self.metric})"
        return f"{body}@{self.spec.label()}"


@dataclass(frozen=True)
class FabricationConstraint:
    """A geometric limit: ``kind`` in FABRICATION_KINDS with its ``value`` [nm or -]."""

    key: str
    kind: str
    value: float

    def to_dict(self) -> dict:
        return {"fabrication": self.kind, "value": self.value}


@dataclass(frozen=True)
class SearchSettings:
    """How the optimizer runs (see the module docstring)."""

    algorithm: str = "SLSQP"
    starts: int = 4
    xtol_rel: float = 1e-6
    ftol_rel: float = 1e-8
    max_evals_per_start: int = 150
    front_method: str = "epsilon-constraint"
    front_points: int = 9
    front_reference: tuple[tuple[str, float], ...] | None = None
    explore: ExploreSettings = field(default_factory=lambda: ExploreSettings())
    confirm_model: dict | None = None
    confirm_polish: int = 0
    starts_from: str | None = None

    def to_dict(self) -> dict:
        front: dict[str, Any] = {"method": self.front_method, "points": self.front_points}
        if self.front_reference is not None:
            front["reference"] = dict(self.front_reference)
        out = {"algorithm": self.algorithm, "starts": self.starts, "xtol_rel": self.xtol_rel,
               "ftol_rel": self.ftol_rel, "max_evals_per_start": self.max_evals_per_start,
               "front": front, "explore": self.explore.to_dict()}
        if self.confirm_model is not None:
            out["confirm"] = {"model": dict(self.confirm_model), "polish": self.confirm_polish}
        if self.starts_from is not None:
            out["starts_from"] = self.starts_from
        return out


@dataclass(frozen=True)
class ExploreSettings:
    """The global exploration before the local searches (``search.explore``).

    ``samples`` geometries (None: ``share`` of the evaluation budget, ``keep`` evaluations
    per geometry); ``wavelength_points`` grid points scanned along a wavelength variable in
    one solve; ``keep`` points kept per geometry; ``batch`` geometries per task; ``lmax`` the
    multipole order of the scan (None: the goal's model); ``tolerance`` the scan's accuracy
    target (``model.tolerance`` of the scan: the cuts of the diffraction orders and of the
    stack-reflected coupling, the dipole model's lattice sums; the looser of it and
    ``model.tolerance``): a screen that only ranks points along the scan needs a few digits.
    """

    samples: int | None = None
    share: float = 0.25
    wavelength_points: int = 21
    keep: int = 3
    batch: int = 16
    lmax: int | None = None
    tolerance: float = 1e-5

    def to_dict(self) -> dict:
        out: dict[str, Any] = {"share": self.share, "wavelength_points": self.wavelength_points,
                               "keep": self.keep, "batch": self.batch,
                               "tolerance": self.tolerance}
        if self.samples is not None:
            out["samples"] = self.samples
        if self.lmax is not None:
            out["lmax"] = self.lmax
        return out


@dataclass(frozen=True)
class Budget:
    """Limits of a run: wall time [s] and/or a total number of evaluations (None: none)."""

    wall_time_s: float | None = None
    evaluations: int | None = None
    wall_time_text: str | None = None

    def to_dict(self) -> dict:
        out: dict[str, Any] = {}
        if self.wall_time_text is not None:
            out["wall_time"] = self.wall_time_text
        if self.evaluations is not None:
            out["evaluations"] = self.evaluations
        return out


@dataclass(frozen=True)
class ExecutorSettings:
    """Where the searches run (``executor``): ``kind`` "local" or "dask"; a Dask scheduler's
    ``address``, or (None) a local cluster of ``workers`` processes (None: one per core) with
    ``threads_per_worker`` threads each."""

    kind: str = "local"
    address: str | None = None
    workers: int | None = None
    threads_per_worker: int = 1

    def to_dict(self) -> Any:
        if self.kind == "local":
            return "local"
        if self.address is not None:
            return {"dask": {"address": self.address}}
        cluster: dict[str, Any] = {"threads_per_worker": self.threads_per_worker}
        if self.workers is not None:
            cluster = {"workers": self.workers, **cluster}
        return {"dask": {"local_cluster": cluster}}


@dataclass(frozen=True)
class Goal:
    """A resolved goal for one material: everything a run needs, validated.

    ``design`` is the base design with ``fixed`` values and the material applied.
    ``material`` is the label of the particle material of this run ('' when the goal gives
    no ``materials`` and the design's material is not a name).
    """

    name: str
    design: Design
    material: str
    variables: tuple[Variable, ...]
    objectives: tuple[Objective, ...]
    constraints: tuple[MetricConstraint | FabricationConstraint, ...] = ()
    links: tuple[tuple[str, str], ...] = ()
    fixed: tuple[tuple[str, Any], ...] = ()
    search: SearchSettings = field(default_factory=SearchSettings)
    budget: Budget = field(default_factory=Budget)
    seed: int = 1
    description: str = ""
    source: str = ""
    executor: ExecutorSettings = field(default_factory=ExecutorSettings)
    located: Any = field(default=None, compare=False, repr=False)

    def where(self, key: str) -> str:
        """``file:line`` of a key path of the goal file ('' when unknown)."""
        return self.located.where(key) if self.located is not None else ""

    def error(self, key: str, message: str) -> InputError:
        """An :class:`InputError` for ``key`` that names its line in the goal file."""
        where = self.where(key)
        return InputError(key, f"{message} ({where})" if where else message)

    @property
    def run_name(self) -> str:
        """Folder name of the run: ``<name>-<material>`` (file-system safe)."""
        return file_safe_name(self._label)

    @property
    def _label(self) -> str:
        return f"{self.name}-{self.material}" if self.material else self.name

    @property
    def name_note(self) -> str:
        """A note when the run folder's name differs from the goal's name ('' otherwise)."""
        if self.run_name == self._label:
            return ""
        return (f"note: run folder named {self.run_name!r} (from {self._label!r}: only ASCII "
                "letters, digits and ._+- are kept in file names)")

    @property
    def metric_constraints(self) -> tuple[MetricConstraint, ...]:
        return tuple(c for c in self.constraints if isinstance(c, MetricConstraint))

    @property
    def fabrication_constraints(self) -> tuple[FabricationConstraint, ...]:
        return tuple(c for c in self.constraints if isinstance(c, FabricationConstraint))

    def to_dict(self) -> dict:
        """The resolved goal as plain data (``goal.resolved.yaml``); defaults made explicit."""
        out: dict[str, Any] = {"name": self.name}
        if self.description:
            out["description"] = self.description
        if self.material:
            out["materials"] = [self.material]
        out["design"] = self.design.to_dict()
        out["variables"] = {v.path: {"min": v.lower, "max": v.upper} for v in self.variables}
        if self.links:
            out["links"] = dict(self.links)
        if self.fixed:
            out["fixed"] = {k: v for k, v in self.fixed}
        out["objectives"] = [o.to_dict() for o in self.objectives]
        out["constraints"] = [c.to_dict() for c in self.constraints]
        out["search"] = self.search.to_dict()
        out["budget"] = self.budget.to_dict()
        out["seed"] = self.seed
        if self.executor.kind != "local":
            out["executor"] = self.executor.to_dict()
        return out


# ---------------------------------------------------------------------------------------------
# parsing
# ---------------------------------------------------------------------------------------------

class _Ctx:
    """Builds errors that name the key path and the line of the goal file."""

    def __init__(self, located: Located | None, base_dir: Path | None = None):
        self.located = located
        self.base_dir = Path(".") if base_dir is None else base_dir

    def error(self, key: str, message: str) -> InputError:
        if self.located is not None:
            return InputError(key, f"{message} ({self.located.where(key)})")
        return InputError(key, message)

    def keys(self, mapping: Any, allowed, path: str) -> None:
        try:
            check_keys(mapping, allowed, path)
        except InputError as exc:
            raise self.error(exc.key, exc.message) from None

    def number(self, value: Any, key: str, *, low: float | None = None,
               high: float | None = None, low_open: bool = False) -> float:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.error(key, f"expected a number, got {value!r}")
        v = float(value)
        if not math.isfinite(v):
            raise self.error(key, f"expected a finite number, got {value!r}")
        if low is not None and (v < low or (low_open and v == low)):
            raise self.error(key, f"got {v:g}, allowed {'>' if low_open else '>='} {low:g}")
        if high is not None and v > high:
            raise self.error(key, f"got {v:g}, allowed <= {high:g}")
        return v

    def integer(self, value: Any, key: str, *, low: int, high: int) -> int:
        if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
            raise self.error(key, f"got {value!r}, allowed an integer in [{low}, {high}]")
        return int(value)


def _closest(name: str, options) -> str:
    close = difflib.get_close_matches(str(name), list(options), n=1, cutoff=0.4)
    return f"; did you mean '{close[0]}'?" if close else ""


def parse_wall_time(text: Any, key: str = "budget.wall_time") -> float:
    """Seconds in a wall-time text: ``8h``, ``90m``, ``1h30m``, ``45s``, or a number [s]."""
    if isinstance(text, int | float) and not isinstance(text, bool):
        if text > 0 and math.isfinite(text):
            return float(text)
    elif isinstance(text, str):
        m = re.fullmatch(r"\s*(?:(\d+(?:\.\d+)?)\s*h)?\s*(?:(\d+(?:\.\d+)?)\s*m)?\s*"
                         r"(?:(\d+(?:\.\d+)?)\s*s)?\s*", text)
        if m and any(m.groups()):
            h, mi, s = (float(g) if g else 0.0 for g in m.groups())
            total = 3600 * h + 60 * mi + s
            if total > 0:
                return total
    raise InputError(key, f"got {text!r}; allowed a positive duration such as 8h, 90m, "
                          "1h30m, 45s or a number of seconds")


def load_goal(path: str | Path) -> list[Goal]:
    """Read and validate a goal file; one :class:`Goal` per material.

    Errors are :class:`InputError` naming the key path and ``file:line``.
    """
    located = load_yaml(path)
    path = Path(path)
    return goal_from_dict(located, base_dir=path.resolve().parent, located=located,
                          default_name=path.stem)


def goal_from_dict(data: dict, *, base_dir: str | Path = ".", located: Located | None = None,
                   default_name: str = "goal") -> list[Goal]:
    """Validate plain goal data into one :class:`Goal` per material (see module docstring)."""
    ctx = _Ctx(located, Path(base_dir))
    if isinstance(data, dict) and "design" not in data and {"lattice", "particles"} & set(data):
        raise InputError("", "this is a design file (it has lattice/particles), not a goal "
                             "file; use chiropt evaluate (or chiropt inspect) with it")
    ctx.keys(data, TOP_KEYS, "")
    for required in ("design", "variables", "objectives"):
        if required not in data:
            raise ctx.error(required, f"missing (required keys: design, variables, "
                                      f"objectives; allowed: {', '.join(sorted(TOP_KEYS))})")
    name = str(data.get("name", default_name)).strip() or default_name
    base_dir = Path(base_dir)
    raw_design = data["design"]
    if isinstance(raw_design, str):
        dpath = (base_dir / raw_design)
        if not dpath.exists():
            raise ctx.error("design", f"design file {str(dpath)!r} not found (paths are "
                                      "relative to the goal file)")
        design_dict = load_design(dpath).to_dict()
        design_base = dpath.resolve().parent
    elif isinstance(raw_design, dict):
        # validate once with line numbers, then keep plain data for the per-material copies
        design_from_dict(raw_design, base_dir=base_dir, located=located, prefix="design.")
        design_dict = dict(raw_design)
        design_base = base_dir
    else:
        raise ctx.error("design", f"expected a design mapping or a path to a design file, got "
                                  f"{raw_design!r}")
    materials = data.get("materials")
    if materials is None:
        mats: list[Any] = [None]
    elif isinstance(materials, str):
        mats = [materials]
    elif isinstance(materials, list) and materials and all(isinstance(m, str) for m in materials):
        mats = list(materials)
    else:
        raise ctx.error("materials", f"expected a material name or a list of names "
                                     f"(e.g. [Si, TiO2]), got {materials!r}")
    if len(set(mats)) != len(mats):
        raise ctx.error("materials", f"a material is listed twice: {mats}")
    goals = []
    for i, mat in enumerate(mats):
        goals.append(_one_goal(ctx, data, name, design_dict, design_base, mat,
                               "materials" if isinstance(materials, str) else f"materials[{i}]"))
    return goals


def _set_path(d: dict, path: str, value: Any) -> None:
    """Set ``value`` at a key path (``particles[0].material.n``) inside plain design data."""
    tokens = re.findall(r"[^.\[\]]+|\[\d+\]", path)
    node: Any = d
    for j, tok in enumerate(tokens):
        last = j == len(tokens) - 1
        if tok.startswith("["):
            idx = int(tok[1:-1])
            if last:
                node[idx] = value
            else:
                node = node[idx]
        else:
            if last:
                node[tok] = value
            else:
                nxt = tokens[j + 1]
                if tok not in node or not isinstance(node[tok], dict | list):
                    # a scalar that becomes a list (period of a rectangular lattice)
                    node[tok] = [node.get(tok), node.get(tok)] if nxt.startswith("[") else {}
                node = node[tok]


def design_with(design: Design, assignments: dict[str, Any]) -> Design:
    """A new validated Design with key-path values assigned (plain floats, user units).

    ``illumination.wavelength_nm`` takes a list of wavelengths [nm].
    """
    import copy

    d = copy.deepcopy(design.to_dict())
    for path, value in assignments.items():
        if path == WAVELENGTH_PATH:
            d["illumination"]["wavelength_nm"] = [float(w) for w in value]
            continue
        _set_path(d, path, float(value))
    return design_from_dict(d, base_dir=design.base_dir)


def _resolve_path(ctx: _Ctx, path: Any, params: dict, key: str) -> str:
    path = str(path).strip()
    if path in params:
        return path
    if path in ALIASES and ALIASES[path] in params:
        return ALIASES[path]
    names = list(params) + [a for a, t in ALIASES.items() if t in params]
    raise ctx.error(key, f"unknown design quantity '{path}'; this design has: "
                         f"{', '.join(params)}{_closest(path, names)}")


def _one_goal(ctx: _Ctx, data: dict, name: str, design_dict: dict, design_base, material,
              material_key: str) -> Goal:
    import copy

    d = copy.deepcopy(design_dict)
    label = ""
    if material is not None:
        for p in d["particles"]:
            p["material"] = material
        label = material
    else:
        first = d["particles"][0].get("material")
        label = first if isinstance(first, str) else ""
    try:
        design = design_from_dict(d, base_dir=design_base)
    except InputError as exc:
        raise ctx.error(material_key, f"with material {material!r}: {exc}") from None
    if material is not None:
        from chiropt.materials import get_material

        try:
            get_material(material, key=material_key, base_dir=design_base)
        except InputError as exc:
            raise ctx.error(material_key, exc.message) from None

    # fixed values first: they change the base design
    fixed_raw = data.get("fixed") or {}
    ctx.keys(fixed_raw, set(fixed_raw), "fixed")  # type check only
    fixed: list[tuple[str, Any]] = []
    params = design.parameters()
    for key, value in fixed_raw.items():
        path = _resolve_path(ctx, key, params, f"fixed.{key}")
        if path == WAVELENGTH_PATH:
            vals = value if isinstance(value, list) else [value]
            nums = [ctx.number(v, f"fixed.{key}", low=1.0) for v in vals]
            fixed.append((path, nums))
        else:
            fixed.append((path, ctx.number(value, f"fixed.{key}")))
    if fixed:
        try:
            design = design_with(design, dict(fixed))
        except InputError as exc:
            raise ctx.error("fixed", f"the fixed values make an invalid design: {exc}") from None
        params = design.parameters()

    # variables
    var_raw = data.get("variables")
    if not isinstance(var_raw, dict) or not var_raw:
        raise ctx.error("variables", "expected a mapping PATH: {min: LOW, max: HIGH} with at "
                                     f"least one entry; this design has: {', '.join(params)}")
    variables = []
    for key, spec in var_raw.items():
        vkey = f"variables.{key}"
        path = _resolve_path(ctx, key, params, vkey)
        if any(v.path == path for v in variables):
            raise ctx.error(vkey, f"'{path}' is already a variable")
        if path in dict(fixed):
            raise ctx.error(vkey, f"'{path}' is also in fixed: a quantity is either fixed or "
                                  "variable")
        ctx.keys(spec, {"min", "max"}, vkey)
        for b in ("min", "max"):
            if b not in spec:
                raise ctx.error(f"{vkey}.{b}", "missing; give both min and max")
        lo = ctx.number(spec["min"], f"{vkey}.min")
        hi = ctx.number(spec["max"], f"{vkey}.max")
        if lo >= hi:
            raise ctx.error(f"{vkey}.min", f"min = {lo:g} is not below max = {hi:g}; did you "
                                           "swap min and max?")
        variables.append(Variable(path, lo, hi))
    _check_bound_ranges(ctx, design, variables)

    # links
    links_raw = data.get("links") or {}
    ctx.keys(links_raw, set(links_raw), "links")
    links = []
    var_paths = {v.path for v in variables}
    for key, src in links_raw.items():
        lkey = f"links.{key}"
        target = _resolve_path(ctx, key, params, lkey)
        source = _resolve_path(ctx, src, params, lkey)
        if target in var_paths:
            raise ctx.error(lkey, f"'{target}' is a variable; a linked quantity follows another "
                                  "and cannot be searched itself")
        if target == source:
            raise ctx.error(lkey, "a quantity linked to itself")
        if WAVELENGTH_PATH in (target, source):
            raise ctx.error(lkey, "the wavelength cannot be linked")
        links.append((target, source))
    targets = {t for t, _ in links}
    for t, s in links:
        if s in targets:
            raise ctx.error(f"links.{t}", f"source '{s}' is itself linked; link to the "
                                          "original quantity")

    # wavelengths of the design (nominal)
    design_wl = tuple(design.illumination.wavelength_nm)

    objectives_raw = data["objectives"]
    if not isinstance(objectives_raw, list) or not 1 <= len(objectives_raw) <= 2:
        raise ctx.error("objectives", f"expected a list of one or two objectives, got "
                                      f"{objectives_raw!r}")
    objectives = tuple(_objective(ctx, o, f"objectives[{i}]", design, design_wl)
                       for i, o in enumerate(objectives_raw))
    cons_raw = data.get("constraints") or []
    if not isinstance(cons_raw, list):
        raise ctx.error("constraints", "expected a list of {metric: ..., min/max: ...} or "
                                       "{fabrication: ..., value: ...}")
    constraints = tuple(_constraint(ctx, c, f"constraints[{i}]", design, design_wl)
                        for i, c in enumerate(cons_raw))
    _check_robust(ctx, design, objectives + constraints, var_paths)
    search = _search(ctx, data.get("search") or {}, objectives)
    budget = _budget(ctx, data.get("budget") or {})
    seed = ctx.integer(data.get("seed", 1), "seed", low=0, high=2**31 - 1)
    executor = _executor(ctx, data.get("executor", "local"))
    return Goal(name=name, design=design, material=label, variables=tuple(variables),
                objectives=objectives, constraints=constraints, links=tuple(links),
                fixed=tuple(fixed), search=search, budget=budget, seed=seed,
                description=str(data.get("description", "")),
                source=ctx.located.source if ctx.located is not None else "",
                located=ctx.located, executor=executor)


def _check_robust(ctx: _Ctx, design: Design, items, var_paths) -> None:
    """A cone follows the design's illumination direction: that direction cannot be a
    variable, and the cone needs light from the host side."""
    for item in items:
        spec = getattr(item, "robust", None)
        if spec is None or spec.na <= 0:
            continue
        moving = sorted(var_paths & {"illumination.polar_deg", "illumination.azimuth_deg"})
        if moving:
            raise ctx.error(f"{item.key}.robust.na", f"a cone average (na > 0) needs a fixed "
                                                     f"illumination direction; '{moving[0]}' "
                                                     "is a variable")
        if design.illumination.side != "host":
            raise ctx.error(f"{item.key}.robust.na", "a cone average (na > 0) needs "
                                                     "illumination from the host side")


def _metric(ctx: _Ctx, name: Any, key: str, design: Design, k_min: float | None = None) -> str:
    """The quantity name of a metric (``ev_share_k`` with ``k_min`` -> ``ev_share_k2``)."""
    given = parse_ev_share_name(name) if isinstance(name, str) else None
    if given is not None:  # the resolved form, ev_share_k2
        lo, hi = K_MIN_RANGE
        if not lo <= given <= hi:
            raise ctx.error(key, f"{name}: threshold {given:g} outside [{lo:g}, {hi:g}]")
        name, k_min = EV_SHARE_K, given
    if not isinstance(name, str) or name not in METRIC_NAMES:
        raise ctx.error(key, f"unknown metric {name!r}; allowed: {', '.join(METRIC_NAMES)}"
                             f"{_closest(str(name), METRIC_NAMES)}")
    if (name in NEAR_FIELD or name in ("docp", "s0") or name in CAPACITY_METRICS) \
            and design.region is None:
        raise ctx.error(key, f"metric '{name}' is a near-field metric and needs a region in "
                             "the design, e.g. region: {kind: plane, height_nm: 10}")
    if name in CAPACITY_METRICS and design.region.inside_layer:
        raise ctx.error(key, f"metric '{name}' is a sum over diffraction orders and needs a "
                             "region above the particle tops (kind plane or slab measured "
                             "from the tops), not a sampled one")
    if name == EV_SHARE_K:
        if k_min is None:
            raise ctx.error(key, f"{EV_SHARE_K} needs its threshold beside it, e.g. "
                                 f"{{metric: {EV_SHARE_K}, k_min: 2.0}}")
        return ev_share_name(k_min)
    return name


def _spec(ctx: _Ctx, raw: dict, key: str, design_wl) -> WavelengthSpec:
    has_at, has_band = "at_nm" in raw, "band_nm" in raw
    if has_at and has_band:
        raise ctx.error(f"{key}.at_nm", "give either at_nm or band_nm, not both")
    if "points" in raw and not has_band:
        raise ctx.error(f"{key}.points", "points goes with band_nm: [start, stop]")
    if has_at:
        w = ctx.number(raw["at_nm"], f"{key}.at_nm", low=1.0, high=1e6)
        return WavelengthSpec("at", (w,))
    if has_band:
        band = raw["band_nm"]
        if not isinstance(band, list) or len(band) != 2:
            raise ctx.error(f"{key}.band_nm", f"expected [start, stop] in nm, got {band!r}")
        a = ctx.number(band[0], f"{key}.band_nm[0]", low=1.0, high=1e6)
        b = ctx.number(band[1], f"{key}.band_nm[1]", low=1.0, high=1e6)
        if a >= b:
            raise ctx.error(f"{key}.band_nm", f"start {a:g} is not below stop {b:g}; did you "
                                              "swap them?")
        pts = ctx.integer(raw.get("points", DEFAULT_BAND_POINTS), f"{key}.points", low=2,
                          high=200)
        wl = tuple(a + (b - a) * i / (pts - 1) for i in range(pts))
        return WavelengthSpec("band", wl, (a, b))
    return WavelengthSpec("design", tuple(design_wl))


def _objective(ctx: _Ctx, raw: Any, key: str, design: Design, design_wl) -> Objective:
    allowed = {"maximize", "minimize", "at_nm", "band_nm", "points", "robust", "k_min"}
    ctx.keys(raw, allowed, key)
    robust = _robust(ctx, raw, key, design)
    k_min = _k_min(ctx, raw, key)
    senses = [s for s in ("maximize", "minimize") if s in raw]
    if len(senses) != 1:
        raise ctx.error(key, "give exactly one of maximize: METRIC or minimize: METRIC")
    skey = f"{key}.{senses[0]}"
    what = raw[senses[0]]
    spec = _spec(ctx, raw, key, design_wl)
    sense = "max" if senses[0] == "maximize" else "min"
    if isinstance(what, dict):
        ctx.keys(what, {"weighted", "normalize"}, skey)
        weights = what.get("weighted")
        if not isinstance(weights, dict) or not weights:
            raise ctx.error(f"{skey}.weighted", "expected a mapping METRIC: WEIGHT, e.g. "
                                                "{g: 0.7, u: 0.3}")
        norm = what.get("normalize") or {}
        if not isinstance(norm, dict):
            raise ctx.error(f"{skey}.normalize", "expected a mapping METRIC: SCALE")
        for m in norm:
            if m not in weights:
                raise ctx.error(f"{skey}.normalize.{m}", f"'{m}' has no weight; weighted "
                                                         f"metrics: {', '.join(weights)}")
        terms = []
        for m, w in weights.items():
            name = _metric(ctx, m, f"{skey}.weighted.{m}", design, k_min)
            wv = ctx.number(w, f"{skey}.weighted.{m}")
            nv = ctx.number(norm.get(m, 1.0), f"{skey}.normalize.{m}", low=0.0, low_open=True)
            terms.append((name, wv, nv))
        _k_min_used(ctx, k_min, [t[0] for t in terms], key)
        return Objective(key, sense, tuple(terms), spec, weighted=True, robust=robust)
    name = _metric(ctx, what, skey, design, k_min)
    _k_min_used(ctx, k_min, [name], key)
    return Objective(key, sense, ((name, 1.0, 1.0),), spec, robust=robust)


def _k_min(ctx: _Ctx, raw: Any, key: str) -> float | None:
    if not isinstance(raw, dict) or "k_min" not in raw:
        return None
    lo, hi = K_MIN_RANGE
    return ctx.number(raw["k_min"], f"{key}.k_min", low=lo, high=hi)


def _k_min_used(ctx: _Ctx, k_min, names, key: str) -> None:
    if k_min is not None and not any(parse_ev_share_name(n) is not None for n in names):
        raise ctx.error(f"{key}.k_min", f"k_min goes with the metric {EV_SHARE_K} (share of "
                                        "the intensity in orders with K = |q|/k >= k_min)")


def _robust(ctx: _Ctx, raw: dict, key: str, design: Design) -> RobustSpec | None:
    """The ``robust:`` entry of an objective or constraint (None without one)."""
    if raw.get("robust") is None:
        return None
    return parse_robust(raw["robust"], f"{key}.robust", design.parameters(), design.host_index,
                        error=ctx.error)


def _constraint(ctx: _Ctx, raw: Any, key: str, design: Design, design_wl):
    if isinstance(raw, dict) and "fabrication" in raw:
        ctx.keys(raw, {"fabrication", "value"}, key)
        kind = raw["fabrication"]
        if kind not in FABRICATION_KINDS:
            raise ctx.error(f"{key}.fabrication", f"unknown kind {kind!r}; allowed: "
                                                  f"{', '.join(FABRICATION_KINDS)}"
                                                  f"{_closest(str(kind), FABRICATION_KINDS)}")
        if "value" not in raw:
            raise ctx.error(f"{key}.value", "missing")
        value = ctx.number(raw["value"], f"{key}.value", low=0.0, low_open=True)
        return FabricationConstraint(key, kind, value)
    ctx.keys(raw, {"metric", "min", "max", "at_nm", "band_nm", "points", "robust", "k_min"},
             key)
    if "metric" not in raw:
        raise ctx.error(f"{key}.metric", "missing; a constraint is {metric: NAME, min: LOW, "
                                         "max: HIGH} or {fabrication: KIND, value: V} with KIND "
                                         f"in {', '.join(FABRICATION_KINDS)}")
    k_min = _k_min(ctx, raw, key)
    metric = _metric(ctx, raw["metric"], f"{key}.metric", design, k_min)
    _k_min_used(ctx, k_min, [metric], key)
    lo = ctx.number(raw["min"], f"{key}.min") if "min" in raw else None
    hi = ctx.number(raw["max"], f"{key}.max") if "max" in raw else None
    if lo is None and hi is None:
        raise ctx.error(key, "give min and/or max")
    if lo is not None and hi is not None and lo > hi:
        raise ctx.error(f"{key}.min", f"min = {lo:g} exceeds max = {hi:g}: no design can "
                                      "satisfy it; did you swap min and max?")
    return MetricConstraint(key, metric, lo, hi, _spec(ctx, raw, key, design_wl),
                            robust=_robust(ctx, raw, key, design))


def _search(ctx: _Ctx, raw: Any, objectives) -> SearchSettings:
    n_objectives = len(objectives)
    allowed = {"algorithm", "starts", "xtol_rel", "ftol_rel", "max_evals_per_start", "front",
               "explore", "confirm", "starts_from"}
    ctx.keys(raw, allowed, "search")
    s = SearchSettings()
    algo = raw.get("algorithm", s.algorithm)
    try:
        algo = get_algorithm(algo).name
    except InputError as exc:
        raise ctx.error("search.algorithm", exc.message) from None
    starts = ctx.integer(raw.get("starts", s.starts), "search.starts", low=1, high=4096)
    xtol = ctx.number(raw.get("xtol_rel", s.xtol_rel), "search.xtol_rel", low=0.0, high=1.0)
    ftol = ctx.number(raw.get("ftol_rel", s.ftol_rel), "search.ftol_rel", low=0.0, high=1.0)
    cap = ctx.integer(raw.get("max_evals_per_start", s.max_evals_per_start),
                      "search.max_evals_per_start", low=1, high=10**7)
    method, points, reference = s.front_method, s.front_points, None
    # a goal of one objective may carry the default front section (goal.resolved.yaml
    # writes it for every goal); anything else there is an error
    default_front = {"method": s.front_method, "points": s.front_points}
    if "front" in raw and not (n_objectives < 2 and raw["front"] == default_front):
        if n_objectives < 2:
            raise ctx.error("search.front", "a front needs two objectives; this goal has one")
        ctx.keys(raw["front"], {"method", "points", "reference"}, "search.front")
        method = raw["front"].get("method", method)
        if method not in FRONT_METHODS:
            raise ctx.error("search.front.method", f"got {method!r}, allowed: "
                                                   f"{', '.join(FRONT_METHODS)}"
                                                   f"{_closest(str(method), FRONT_METHODS)}")
        points = ctx.integer(raw["front"].get("points", points), "search.front.points", low=2,
                             high=1000)
        if "reference" in raw["front"]:
            reference = _reference(ctx, raw["front"]["reference"], objectives)
    explore = _explore(ctx, raw.get("explore") or {})
    confirm_model, polish = None, 0
    if raw.get("confirm") is not None:
        conf = raw["confirm"]
        ctx.keys(conf, {"model", "polish"}, "search.confirm")
        if not isinstance(conf.get("model"), dict):
            raise ctx.error("search.confirm.model", "missing; a model section such as "
                                                    "{solver: fourier, harmonics: auto}")
        confirm_model = dict(conf["model"])
        polish = ctx.integer(conf.get("polish", 0), "search.confirm.polish", low=0, high=200)
    starts_from = None
    if raw.get("starts_from") is not None:
        text = raw["starts_from"]
        if not isinstance(text, str) or not text.strip():
            raise ctx.error("search.starts_from", f"expected the path of an earlier run's "
                                                  f"front.csv, got {text!r}")
        starts_from = str(ctx.base_dir / text) if not Path(text).is_absolute() else text
    return replace(s, algorithm=algo, starts=starts, xtol_rel=xtol, ftol_rel=ftol,
                   max_evals_per_start=cap, front_method=method, front_points=points,
                   front_reference=reference, explore=explore, confirm_model=confirm_model,
                   confirm_polish=polish, starts_from=starts_from)


def reference_keys(objective) -> tuple[str, ...]:
    """Names a ``search.front.reference`` entry may use for an objective: its label
    (``g@700nm``) and, for a plain metric, the metric (``g``)."""
    return (objective.label(),) + (() if objective.weighted else (objective.terms[0][0],))


def _reference(ctx: _Ctx, raw: Any, objectives) -> tuple[tuple[str, float], ...]:
    key = "search.front.reference"
    names = [reference_keys(o) for o in objectives]
    allowed = {n for ns in names for n in ns}
    ctx.keys(raw, allowed, key)
    out = []
    for o, ns in zip(objectives, names, strict=True):
        given = [n for n in ns if n in raw]
        if len(given) != 1:
            raise ctx.error(key, f"give exactly one reference value for objective {o.key} "
                                 f"(key {' or '.join(ns)}); got {len(given)}")
        out.append((given[0], ctx.number(raw[given[0]], f"{key}.{given[0]}")))
    if len({k for k, _ in out}) != len(out):
        raise ctx.error(key, "the two objectives share a metric: use their labels "
                             f"({', '.join(o.label() for o in objectives)}) as keys")
    return tuple(out)


def _explore(ctx: _Ctx, raw: Any) -> ExploreSettings:
    key = "search.explore"
    ctx.keys(raw, {"samples", "share", "wavelength_points", "keep", "batch", "lmax", "tolerance"},
             key)
    e = ExploreSettings()
    samples = None
    if "samples" in raw:
        samples = ctx.integer(raw["samples"], f"{key}.samples", low=0, high=10**6)
    share = ctx.number(raw.get("share", e.share), f"{key}.share", low=0.0, high=0.9)
    points = ctx.integer(raw.get("wavelength_points", e.wavelength_points),
                         f"{key}.wavelength_points", low=1, high=1001)
    keep = ctx.integer(raw.get("keep", e.keep), f"{key}.keep", low=1, high=100)
    batch = ctx.integer(raw.get("batch", e.batch), f"{key}.batch", low=1, high=10**4)
    lmax = None
    if "lmax" in raw:
        lmax = ctx.integer(raw["lmax"], f"{key}.lmax", low=1, high=8)
    tol = ctx.number(raw.get("tolerance", e.tolerance), f"{key}.tolerance", low=1e-14,
                     high=1e-2)
    return ExploreSettings(samples=samples, share=share, wavelength_points=points, keep=keep,
                           batch=batch, lmax=lmax, tolerance=tol)


def _budget(ctx: _Ctx, raw: Any) -> Budget:
    ctx.keys(raw, {"wall_time", "evaluations"}, "budget")
    wall = text = None
    if "wall_time" in raw:
        try:
            wall = parse_wall_time(raw["wall_time"])
        except InputError as exc:
            raise ctx.error("budget.wall_time", exc.message) from None
        text = str(raw["wall_time"])
    evals = None
    if "evaluations" in raw:
        evals = ctx.integer(raw["evaluations"], "budget.evaluations", low=1, high=10**9)
    return Budget(wall_time_s=wall, evaluations=evals, wall_time_text=text)


def _check_bound_ranges(ctx: _Ctx, design: Design, variables) -> None:
    """Each variable's bounds inside the quantity's own allowed range (design validation).

    The base design with that one quantity at ``min`` (then ``max``) is validated; only the
    quantity's own range check counts here (its message starts with "got"), not limits that
    involve other quantities (those are the search's business, e.g. overlapping particles).
    """
    for v in variables:
        for which, value in (("min", v.lower), ("max", v.upper)):
            try:
                design_with(design, {v.path: [value] if v.path == WAVELENGTH_PATH else value})
            except InputError as exc:
                if exc.key.endswith(v.path) and exc.message.startswith("got "):
                    raise ctx.error(f"variables.{v.path}.{which}",
                                    f"bound {value:g} is outside the allowed range of "
                                    f"{v.path}: {exc.message}") from None


ADDRESS = re.compile(r"^(?:[a-z][a-z0-9+.-]*://)?[^\s/:]+(?::\d+)?$")
MAX_LOCAL_WORKERS = 1024


def _address(ctx: _Ctx, value: Any, key: str) -> str:
    if not isinstance(value, str) or not ADDRESS.match(value.strip()):
        raise ctx.error(key, f"got {value!r}, allowed a Dask scheduler address such as "
                             "tcp://HOST:8786")
    return value.strip()


def _executor(ctx: _Ctx, raw: Any) -> ExecutorSettings:
    key = "executor"
    if raw == "local":
        return ExecutorSettings()
    if raw == "dask":
        return ExecutorSettings(kind="dask")
    if not isinstance(raw, dict) or set(raw) != {"dask"}:
        raise ctx.error(key, f"got {raw!r}, allowed local, dask, {{dask: {{address: "
                             "tcp://HOST:8786}} or {dask: {local_cluster: {workers: N, "
                             "threads_per_worker: T}}}")
    d = raw["dask"] if raw["dask"] is not None else {}
    ctx.keys(d, {"address", "local_cluster"}, f"{key}.dask")
    if "address" in d and "local_cluster" in d:
        raise ctx.error(f"{key}.dask", "give either address (a running scheduler) or "
                                       "local_cluster (one started by the run), not both")
    if "address" in d:
        return ExecutorSettings(kind="dask", address=_address(ctx, d["address"],
                                                              f"{key}.dask.address"))
    lc = d.get("local_cluster") or {}
    ctx.keys(lc, {"workers", "threads_per_worker"}, f"{key}.dask.local_cluster")
    workers = None
    if "workers" in lc:
        workers = ctx.integer(lc["workers"], f"{key}.dask.local_cluster.workers", low=1,
                              high=MAX_LOCAL_WORKERS)
    threads = ctx.integer(lc.get("threads_per_worker", 1),
                          f"{key}.dask.local_cluster.threads_per_worker", low=1, high=256)
    return ExecutorSettings(kind="dask", workers=workers, threads_per_worker=threads)


def parse_executor_option(text: str) -> ExecutorSettings:
    """``chiropt run --executor``: ``local``, ``dask`` (a local cluster) or an address."""
    t = str(text).strip()
    if t == "local":
        return ExecutorSettings()
    if t == "dask":
        return ExecutorSettings(kind="dask")
    if "://" in t and ADDRESS.match(t):
        return ExecutorSettings(kind="dask", address=t)
    raise InputError("--executor", f"got {text!r}, allowed local, dask (a local Dask cluster "
                                   "of --workers processes) or a scheduler address such as "
                                   "tcp://HOST:8786")
