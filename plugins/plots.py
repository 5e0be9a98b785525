"""Plot export: PNG figures of each observer group's waveforms, energy-fluence maps (planes
and spheres), when spectra were computed, spectral fluence and band-fluence maps, and, with
detectors, each detector's voltage (analog and digitized overlaid).

The fluence maps show the run's `fluence` table (exact from the source motion where it can
be) and say how it was obtained; without that table they fall back on the bin averages and
say that this is a lower bound. Spheres are drawn on the plane of directions (θ cos φ,
θ sin φ), each point's cell the sector it stands for. Spectra get a linear frequency axis
when the run's spacing is linear, a log one when it is log.

matplotlib is imported only inside `PlotExporter.write`, through its object-oriented
Figure API with the Agg canvas, so importing this module (or listing plugins) stays light.
The helpers that turn tables into grids need only NumPy and the pandas tables they get.
"""

from __future__ import annotations

import dataclasses
import math
import pathlib
import re
import textwrap
from typing import TYPE_CHECKING

import numpy as np
from scipy import constants

import lagfield
from lagfield.errors import ConfigError
from lagfield.typos import nearest
from lagfield.units import to_si

if TYPE_CHECKING:  # pandas loads with the tables it is given, not with this module
    import pandas as pd

OPTION_DEFAULTS = {"dpi": 120, "max_curves": 6, "band": None}
WHERE = "[plugins.plots]"
TIME_UNITS = (("s", 1.0), ("ms", 1e-3), ("µs", 1e-6), ("ns", 1e-9), ("ps", 1e-12),
              ("fs", 1e-15), ("as", 1e-18))
NOISE_FLOOR = 1e-12  # log spectra show nothing below this fraction of the peak (common
# practice: the quadrature and transforms leave noise some 1e-12 of the peak and below)
NOISE_PERCENTILE = 1.0  # ... nor below this percentile of the positive values
ARC_STEP_RAD = math.radians(3.0)  # sphere maps: azimuthal cells drawn as arcs of this step
FREQUENCY_UNITS = (("PHz", 1e15), ("THz", 1e12), ("GHz", 1e9), ("MHz", 1e6), ("kHz", 1e3),
                   ("Hz", 1.0))
OHM_UNITS = (("MΩ", 1e6), ("kΩ", 1e3), ("Ω", 1.0), ("mΩ", 1e-3))
FARAD_UNITS = (("µF", 1e-6), ("nF", 1e-9), ("pF", 1e-12), ("fF", 1e-15))
DETECTOR_PANELS = 4  # detectors per voltage figure; more go to further figures


# ---------------------------------------------------------------------------------------
# Options


@dataclasses.dataclass(frozen=True)
class PlotOptions:
    dpi: float
    max_curves: int
    band_hz: tuple[float, float] | None  # None: the whole computed band


def parse_options(options: dict) -> PlotOptions:
    """The [plugins.plots] table, checked; a ConfigError names the key that is wrong."""
    options = dict(options or {})
    for key in options:
        if key not in OPTION_DEFAULTS:
            close = nearest(key, OPTION_DEFAULTS)
            hint = f" (did you mean '{close}'?)" if close else ""
            raise ConfigError(f"{WHERE}: unknown key '{key}'{hint}; known keys: "
                              f"{', '.join(OPTION_DEFAULTS)}")
    merged = {**OPTION_DEFAULTS, **options}
    dpi = merged["dpi"]
    if isinstance(dpi, bool) or not isinstance(dpi, int | float) or not 10 <= dpi <= 2000:
        raise ConfigError(f"{WHERE} dpi: expected a number from 10 to 2000, got {dpi!r}")
    max_curves = merged["max_curves"]
    if isinstance(max_curves, bool) or not isinstance(max_curves, int) or max_curves < 1:
        raise ConfigError(f"{WHERE} max_curves: expected a whole number of at least 1, "
                          f"got {max_curves!r}")
    band = merged["band"]
    if band is not None:
        if not isinstance(band, list | tuple) or len(band) != 2:
            raise ConfigError(f"{WHERE} band: expected [f_lo, f_hi] (Hz, or strings such "
                              f"as \"1 THz\"), got {band!r}")
        f_lo, f_hi = (to_si(value, "frequency", where=f"{WHERE} band[{i}]")
                      for i, value in enumerate(band))
        if not (math.isfinite(f_lo) and math.isfinite(f_hi) and 0.0 <= f_lo < f_hi):
            raise ConfigError(f"{WHERE} band: expected 0 <= f_lo < f_hi, got "
                              f"[{f_lo:g}, {f_hi:g}] Hz")
        band = (f_lo, f_hi)
    return PlotOptions(dpi=float(dpi), max_curves=max_curves, band_hz=band)


# ---------------------------------------------------------------------------------------
# Geometry: recovering the plane or sphere grid from the observers table


@dataclasses.dataclass(frozen=True, eq=False)
class GridLayout:
    """A plane or sphere group as a rectangular grid.

    points: (n_a, n_b) point numbers. Plane: a, b are the u and v coordinates (m) of the
    grid lines about the plane's center, u_hat, v_hat its unit vectors (None along an axis
    of one point). Sphere: a = theta, b = phi (rad), radius_m from center_m.
    """

    kind: str
    points: np.ndarray
    a: np.ndarray
    b: np.ndarray
    center_m: np.ndarray
    u_hat: np.ndarray | None = None
    v_hat: np.ndarray | None = None
    radius_m: float | None = None


def _positions(observers_of_group: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    table = observers_of_group.sort_values("point")
    return table["point"].to_numpy(), table[["x", "y", "z"]].to_numpy(dtype=float)


def _divisor_pairs(n: int):
    for n_v in range(2, n // 2 + 1):
        if n % n_v == 0 and n // n_v >= 2:
            yield n // n_v, n_v


def _plane_layout(points, positions, shape=None) -> GridLayout | None:
    """The grid point = i_u·n_v + i_v that the positions follow, or None."""
    n = len(points)
    candidates = [shape] if shape is not None else list(_divisor_pairs(n))
    scale = float(np.max(np.abs(positions))) if n else 0.0
    for n_u, n_v in candidates:
        if n_u * n_v != n or n < 2:
            continue
        du = positions[n_v] - positions[0] if n_u > 1 else np.zeros(3)
        dv = positions[1] - positions[0] if n_v > 1 else np.zeros(3)
        step_u, step_v = float(np.linalg.norm(du)), float(np.linalg.norm(dv))
        if (n_u > 1 and step_u == 0.0) or (n_v > 1 and step_v == 0.0):
            continue
        if n_u > 1 and n_v > 1 and np.linalg.norm(np.cross(du, dv)) < 1e-9 * step_u * step_v:
            continue
        i_u, i_v = np.divmod(np.arange(n), n_v)
        predicted = positions[0] + i_u[:, None] * du + i_v[:, None] * dv
        tolerance = 1e-6 * min(s for s in (step_u, step_v) if s > 0) + 1e-12 * scale
        if np.max(np.abs(predicted - positions)) > tolerance:
            continue
        return GridLayout(
            kind="plane", points=points.reshape(n_u, n_v),
            a=(np.arange(n_u) - (n_u - 1) / 2) * step_u,
            b=(np.arange(n_v) - (n_v - 1) / 2) * step_v,
            center_m=positions.mean(axis=0),
            u_hat=du / step_u if n_u > 1 else None, v_hat=dv / step_v if n_v > 1 else None)
    return None


def _sphere_layout(points, positions, theta, phi) -> GridLayout | None:
    """The theta-major grid point = i_theta·n_phi + i_phi, with the center and radius
    fitted to position = center + R·direction(theta, phi); None if not a grid."""
    n = len(points)
    n_phi = len(np.unique(phi))
    if n % n_phi:
        return None
    grid_theta, grid_phi = theta.reshape(-1, n_phi), phi.reshape(-1, n_phi)
    if not (np.all(grid_theta == grid_theta[:, :1]) and np.all(grid_phi == grid_phi[:1])):
        return None
    directions = np.stack([np.sin(theta) * np.cos(phi), np.sin(theta) * np.sin(phi),
                           np.cos(theta)], axis=1)
    # unknowns (cx, cy, cz, R): position_i = c + R d_i
    matrix = np.zeros((3 * n, 4))
    matrix[:, :3] = np.tile(np.eye(3), (n, 1))
    matrix[:, 3] = directions.ravel()
    solution, _, rank, _ = np.linalg.lstsq(matrix, positions.ravel(), rcond=None)
    if rank == 4 and solution[3] > 0:
        center, radius = solution[:3], float(solution[3])
    else:  # every point in one direction: seen from the coordinate origin
        center, radius = np.zeros(3), float(np.mean(np.linalg.norm(positions, axis=1)))
    return GridLayout(kind="sphere", points=points.reshape(-1, n_phi), a=grid_theta[:, 0],
                      b=grid_phi[0], center_m=center, radius_m=radius)


def _declared_plane_shape(summary: dict | None, name: str):
    """(n_u, n_v) of a plane group as the run file declared it, when the summary has it."""
    run = (summary or {}).get("run") or {}
    for entry in run.get("observers", []) if isinstance(run, dict) else []:
        if isinstance(entry, dict) and entry.get("name") == name and "plane" in entry:
            shape = (entry["plane"] or {}).get("shape")
            if isinstance(shape, list | tuple) and len(shape) == 2:
                return int(shape[0]), int(shape[1])
    return None


def grid_layout(observers_of_group: pd.DataFrame, summary: dict | None = None
                ) -> GridLayout | None:
    """The plane or sphere grid of one group's observers rows; None for a list of points.

    A sphere is recognised by its theta and phi columns; a plane by positions that follow
    point = i_u·n_v + i_v on two non-parallel steps (n_u, n_v >= 2), or by the shape the
    run file declared (from the run summary, when given).
    """
    points, positions = _positions(observers_of_group)
    table = observers_of_group.sort_values("point")
    if {"theta", "phi"} <= set(table.columns) and table[["theta", "phi"]].notna().all().all():
        return _sphere_layout(points, positions, table["theta"].to_numpy(dtype=float),
                              table["phi"].to_numpy(dtype=float))
    name = str(table["observer"].iloc[0]) if len(table) else ""
    return _plane_layout(points, positions, _declared_plane_shape(summary, name))


# ---------------------------------------------------------------------------------------
# Quantities plotted


def time_step_s(fields_of_group: pd.DataFrame, summary: dict | None = None) -> float | None:
    """The sampling step of a group's fields (the smallest spacing of any point's times);
    with one sample per point, the run file's [time] step; None if neither is known."""
    steps = []
    for _, times in fields_of_group.groupby("point")["t"]:
        diffs = np.diff(np.sort(times.to_numpy(dtype=float)))
        diffs = diffs[diffs > 0]
        if diffs.size:
            steps.append(float(diffs.min()))
    if steps:
        return min(steps)
    step = (((summary or {}).get("run") or {}).get("time") or {}).get("step")
    if step is None:
        return None
    return to_si(step, "time", where="[time] step")


def point_fluence(fields_of_group: pd.DataFrame, step_s: float | None = None) -> pd.Series:
    """Energy fluence ε0 c step Σ|Ē|² (J/m²) of each point's bin averages Ē (a Series
    indexed by point): ε0 c ∫|E|² dt where the step resolves the pulse, less elsewhere (the
    square of an average is at most the average of the square)."""
    if step_s is None:
        step_s = time_step_s(fields_of_group)
    if step_s is None:
        raise ValueError("the time step is unknown (one sample per point)")
    e_squared = (fields_of_group["Ex"] ** 2 + fields_of_group["Ey"] ** 2
                 + fields_of_group["Ez"] ** 2)
    summed = e_squared.groupby(fields_of_group["point"]).sum()
    return constants.epsilon_0 * constants.c * step_s * summed


def band_fluence(spectra_of_group: pd.DataFrame, band_hz, column: str = "fluence"
                 ) -> pd.Series:
    """∫ column df over the computed frequencies within band_hz = (f_lo, f_hi), by point
    (trapezoid rule on the frequency list; J/m² for fluence, J/sr for dW_df_dOmega)."""
    from scipy import integrate

    f_lo, f_hi = band_hz
    inside = spectra_of_group[(spectra_of_group["f"] >= f_lo) & (spectra_of_group["f"] <= f_hi)]
    out = {}
    for point, rows in inside.groupby("point"):
        rows = rows.sort_values("f")
        out[point] = float(integrate.trapezoid(rows[column].to_numpy(dtype=float),
                                        rows["f"].to_numpy(dtype=float)))
    import pandas as pd

    return pd.Series(out, dtype=float)


def fluence_by_point(fluence_of_group: pd.DataFrame | None, fields_of_group: pd.DataFrame,
                     step_s: float | None):
    """(fluence (J/m²), dW_dOmega (J/sr) or None, method) of a group's points, as Series by
    point: from the run's fluence table when it has the group, else from the bin averages
    (a lower bound where the step does not resolve the pulse); None when neither is known."""
    if fluence_of_group is not None and len(fluence_of_group):
        table = fluence_of_group.set_index("point").sort_index()
        per_sr = None
        if "dW_dOmega" in table.columns and table["dW_dOmega"].notna().all():
            per_sr = table["dW_dOmega"].astype(float)
        return table["fluence"].astype(float), per_sr, str(table["method"].iloc[0])
    if step_s is None or not len(fields_of_group):
        return None
    from lagfield.fluence import METHOD_BINS

    return point_fluence(fields_of_group, step_s), None, METHOD_BINS


def values_on_grid(layout: GridLayout, values_by_point: pd.Series) -> np.ndarray:
    """(n_a, n_b) array of per-point values (NaN where a point has none)."""
    return values_by_point.reindex(layout.points.ravel()).to_numpy(dtype=float).reshape(
        layout.points.shape)


def fluence_grid(observers_of_group: pd.DataFrame, fields_of_group: pd.DataFrame,
                 step_s: float | None = None):
    """(a, b, fluence) of a plane or sphere group from its bin averages (see point_fluence):
    plane: u_mm (n_u,), v_mm (n_v,); sphere: theta_rad (n_theta,), phi_rad (n_phi,);
    fluence (n_a, n_b) in J/m²."""
    layout = grid_layout(observers_of_group)
    if layout is None:
        raise ValueError("these observers are not a plane or sphere grid")
    values = values_on_grid(layout, point_fluence(fields_of_group, step_s))
    if layout.kind == "plane":
        return layout.a * 1e3, layout.b * 1e3, values
    return layout.a, layout.b, values


def sphere_mesh(layout: GridLayout, values: np.ndarray):
    """(x, y, c): the cells of a sphere grid projected on the plane of directions, x = θ cos φ,
    y = θ sin φ (rad), for pcolormesh: x, y (n_θ + 1, m + 1) cell corners, c (n_θ, m).
    A cell spans half-way to its neighbours in θ (clipped to [0, π]) and in φ; each φ cell
    is split into arcs of at most ARC_STEP_RAD so that it is drawn as the sector it is."""
    theta_edges = np.clip(_edges(layout.a), 0.0, math.pi)
    phi_edges = _edges(layout.b)
    pieces = max(1, math.ceil(float(np.max(np.diff(phi_edges))) / ARC_STEP_RAD))
    fractions = np.arange(pieces) / pieces
    fine = np.append((phi_edges[:-1, None] + np.diff(phi_edges)[:, None] * fractions).ravel(),
                     phi_edges[-1])
    x = theta_edges[:, None] * np.cos(fine)[None, :]
    y = theta_edges[:, None] * np.sin(fine)[None, :]
    return x, y, np.repeat(values, pieces, axis=1)


def frequency_spacing(frequencies_hz, summary: dict | None = None) -> str:
    """"linear" or "log": the run file's [spectrum] spacing when the summary has it, else
    what the frequency list follows (equal steps or equal ratios); a list reaching 0 Hz is
    linear."""
    f = np.unique(np.asarray(frequencies_hz, dtype=float))
    if f.size and f[0] <= 0.0:
        return "linear"
    spectrum = ((summary or {}).get("run") or {}).get("spectrum") or {}
    frequencies = spectrum.get("frequencies") if isinstance(spectrum, dict) else None
    declared = frequencies.get("spacing") if isinstance(frequencies, dict) else None
    if declared in ("linear", "log"):
        return declared
    if f.size < 3:
        return "log" if f.size == 2 and f[1] > 10 * f[0] else "linear"
    steps = np.diff(f)
    if np.allclose(steps, steps.mean(), rtol=1e-6, atol=0.0):
        return "linear"
    ratios = f[1:] / f[:-1]
    if np.allclose(ratios, ratios.mean(), rtol=1e-6, atol=0.0):
        return "log"
    return "log" if f[-1] > 100 * f[0] else "linear"


def log_floor(values) -> float | None:
    """Lowest value a log axis shows: NOISE_FLOOR × the peak or the NOISE_PERCENTILE-th
    percentile of the positive values, whichever is larger; None if none is positive."""
    values = np.asarray(values, dtype=float)
    positive = values[np.isfinite(values) & (values > 0)]
    if not positive.size:
        return None
    return max(float(positive.max()) * NOISE_FLOOR,
               float(np.percentile(positive, NOISE_PERCENTILE)))


# ---------------------------------------------------------------------------------------
# Labels and units


def pick_unit(scale: float, units) -> tuple[str, float]:
    """The largest unit from `units` (largest first) that `scale` is at least one of."""
    scale = abs(scale)
    for name, factor in units:
        if scale >= factor * (1 - 1e-9):
            return name, factor
    return units[-1]


def _format_quantity(value: float, units, digits: int = 6) -> str:
    """`value` in the largest unit of `units` it is at least one of (the last for 0), to
    `digits` significant digits."""
    name, factor = pick_unit(value, units) if value else units[-1]
    return f"{value / factor:.{digits}g} {name}"


def time_scale(times_s: np.ndarray) -> tuple[float, float, str]:
    """(reference_s, unit_s, axis label) for plotting times as (t - reference) / unit in a
    unit chosen from the span; the reference is non-zero only for a window far from t = 0."""
    t_min, t_max = float(np.min(times_s)), float(np.max(times_s))
    span = t_max - t_min
    unit, factor = pick_unit(span if span > 0 else (abs(t_min) or 1e-9), TIME_UNITS)
    reference = 0.0
    if span > 0 and abs(t_min) > 10 * span:
        decade = 10.0 ** math.floor(math.log10(span))
        reference = math.floor(t_min / decade + 1e-9) * decade
    label = "time t" if reference == 0.0 else f"t − {_format_quantity(reference, TIME_UNITS)}"
    return reference, factor, f"{label} ({unit})"


def _angle_unit(angles_rad: np.ndarray) -> tuple[str, float]:
    return ("mrad", 1e-3) if np.max(np.abs(angles_rad)) < 0.2 else ("°", math.pi / 180)


def _vector(v, scale: float = 0.0) -> str:
    """"(x, y, z)" with components below 1e-9 of the largest one (or of `scale`) as 0."""
    v = np.asarray(v, dtype=float)
    tiny = 1e-9 * max(float(np.max(np.abs(v))) if v.size else 0.0, abs(scale))
    return "(" + ", ".join(f"{0.0 if abs(x) <= tiny else x:.4g}" for x in v) + ")"


def point_label(observers_of_group: pd.DataFrame, point: int,
                layout: GridLayout | None) -> str:
    row = observers_of_group[observers_of_group["point"] == point].iloc[0]
    if layout is not None and layout.kind == "sphere":
        t_unit, t_factor = _angle_unit(layout.a)
        return (f"point {point}: θ = {row['theta'] / t_factor:.3g} {t_unit}, "
                f"φ = {math.degrees(row['phi']):.3g}°")
    if layout is not None and layout.kind == "plane":
        i_a, i_b = np.argwhere(layout.points == point)[0]
        return (f"point {point}: u = {layout.a[i_a] * 1e3:.3g} mm, "
                f"v = {layout.b[i_b] * 1e3:.3g} mm")
    xyz = row[["x", "y", "z"]].to_numpy(dtype=float)
    unit, factor = ("m", 1.0) if np.max(np.abs(xyz)) >= 1.0 else ("mm", 1e-3)
    return f"point {point}: {_vector(xyz / factor)} {unit}"


def representative_points(points: np.ndarray, max_curves: int) -> list[int]:
    """Up to max_curves point numbers spread evenly over the group, first and last kept."""
    points = np.sort(np.asarray(points))
    if len(points) <= max_curves:
        return [int(p) for p in points]
    picks = np.unique(np.round(np.linspace(0, len(points) - 1, max_curves)).astype(int))
    return [int(points[i]) for i in picks]


def _edges(centers: np.ndarray) -> np.ndarray:
    """Cell edges around grid centers (a cell of one point gets a width of its own)."""
    centers = np.asarray(centers, dtype=float)
    if centers.size == 1:
        half = 0.5 * (abs(centers[0]) or 1.0)
        return np.array([centers[0] - half, centers[0] + half])
    middle = 0.5 * (centers[1:] + centers[:-1])
    return np.concatenate([[2 * centers[0] - middle[0]], middle,
                           [2 * centers[-1] - middle[-1]]])


def safe_stem(name: str) -> str:
    """A group name made safe as a file-name stem."""
    return re.sub(r"[^A-Za-z0-9._-]+", "_", name).strip("._") or "group"


# ---------------------------------------------------------------------------------------
# Figures (matplotlib imported here only)


def _new_figure(width_in: float, height_in: float):
    from matplotlib.figure import Figure

    return Figure(figsize=(width_in, height_in), layout="constrained")


def _save(figure, directory: pathlib.Path, file_name: str, dpi: float) -> str:
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(figure)
    figure.savefig(directory / file_name, dpi=dpi, format="png")
    return file_name


def _footer(figure, text: str | None, width_chars: int) -> None:
    """The run's safety note, wrapped to `width_chars`, in small grey type below the plots."""
    if text:
        figure.supxlabel("\n".join(textwrap.wrap(text, width_chars)), fontsize="small",
                         color="0.35")


def _sci(axis, which="y"):
    axis.ticklabel_format(axis=which, style="sci", scilimits=(-3, 4), useMathText=True)


def plot_waveforms(name, observers_of_group, fields_of_group, layout, picks, step_s=None,
                   footer=None):
    """E of the picked points against time; `footer` (the run's safety note) goes below."""
    figure = _new_figure(8.0, 9.0)
    axes = figure.subplots(4, 1, sharex=True)
    chosen = fields_of_group[fields_of_group["point"].isin(picks)]
    reference_s, unit_s, time_label = time_scale(chosen["t"].to_numpy(dtype=float))
    for point in picks:
        rows = chosen[chosen["point"] == point].sort_values("t")
        t = rows["t"].to_numpy(dtype=float)
        scaled = (t - reference_s) / unit_s
        e = rows[["Ex", "Ey", "Ez"]].to_numpy(dtype=float)
        series = (e[:, 0], e[:, 1], e[:, 2], np.sqrt(np.sum(e * e, axis=1)))
        marker = "o" if len(t) < 3 else None
        label = point_label(observers_of_group, point, layout)
        for ax, values in zip(axes, series, strict=True):
            ax.plot(scaled, values, marker=marker, linewidth=1.0, label=label)
    for ax, quantity in zip(axes, ("E_x", "E_y", "E_z", "|E|"), strict=True):
        ax.set_ylabel(f"${quantity}$ (V/m)" if quantity != "|E|" else "|E| (V/m)")
        ax.grid(True, alpha=0.3)
        _sci(ax)
        ax.ticklabel_format(axis="x", useOffset=False)
    axes[-1].set_xlabel(time_label)
    shown = len(picks)
    total = fields_of_group["point"].nunique()
    note = f" ({shown} of {total} points)" if shown < total else ""
    averaged = (f"\neach sample the average of E over a step of "
                f"{_format_quantity(step_s, TIME_UNITS)}" if step_s else "")
    axes[0].set_title(f"{name}: electric field waveforms{note}{averaged}")
    handles, labels = axes[0].get_legend_handles_labels()
    # the legend above the plots, so that the footer has the bottom to itself
    figure.legend(handles, labels, loc="outside upper center", ncols=2, fontsize="small")
    _footer(figure, footer, 110)
    return figure


def _map_axes(ax, layout: GridLayout, values: np.ndarray, label: str, figure):
    """Draw one map of per-point values: a plane on its own (u, v) coordinates, a sphere on
    the plane of directions (θ cos φ, θ sin φ), each cell the sector it stands for."""
    finite = values[np.isfinite(values)]
    top = float(finite.max()) if finite.size and finite.max() > 0 else 1.0
    if layout.kind == "plane":
        x, y = layout.a * 1e3, layout.b * 1e3
        mesh = ax.pcolormesh(_edges(x), _edges(y), values.T, shading="flat",  # C[i_v, i_u]
                             cmap="viridis", vmin=0.0, vmax=top)
        ax.set_xlabel("u (mm)")
        ax.set_ylabel("v (mm)")
        if len(x) > 1 and len(y) > 1:
            ax.set_aspect("equal")
    else:
        t_unit, t_factor = _angle_unit(layout.a)
        x, y, c = sphere_mesh(layout, values)
        mesh = ax.pcolormesh(x / t_factor, y / t_factor, c, shading="flat", cmap="viridis",
                             vmin=0.0, vmax=top)
        ax.set_xlabel(f"θ cos φ ({t_unit})")
        ax.set_ylabel(f"θ sin φ ({t_unit})")
        ax.set_aspect("equal")
        theta = layout.a[:, None] * np.ones_like(layout.b)[None, :]
        ax.plot((theta * np.cos(layout.b)).ravel() / t_factor,
                (theta * np.sin(layout.b)).ravel() / t_factor, linestyle="none", marker=".",
                markersize=2, color="white", alpha=0.6)  # the computed directions
    bar = figure.colorbar(mesh, ax=ax)
    bar.set_label(label)
    bar.formatter.set_useMathText(True)
    bar.formatter.set_powerlimits((-3, 4))
    bar.update_ticks()


def _geometry_note(layout: GridLayout) -> str:
    if layout.kind == "plane":
        parts = [f"center {_vector(layout.center_m)} m"]
        if layout.u_hat is not None:
            parts.append(f"u = {_vector(layout.u_hat)}")
        if layout.v_hat is not None:
            parts.append(f"v = {_vector(layout.v_hat)}")
        return ", ".join(parts)
    center = _vector(layout.center_m, scale=layout.radius_m)
    return (f"sphere of radius {layout.radius_m:.4g} m about {center} m; θ from +z, "
            "φ from +x; dots: computed directions")


def plot_map(name, layout: GridLayout, values: np.ndarray, what: str, note: str,
             per_sr: np.ndarray | None = None, footer: str | None = None):
    """A plane map, or a sphere map with its per-solid-angle twin beside it; `note` says
    how the values were obtained, `footer` (the run's safety note) goes below."""
    panels = 1 if per_sr is None else 2
    figure = _new_figure(6.0 * panels + 0.5, 5.6)
    axes = np.atleast_1d(figure.subplots(1, panels))
    _map_axes(axes[0], layout, values, f"{what} (J/m²)", figure)
    if per_sr is not None:
        _map_axes(axes[1], layout, per_sr, "energy per solid angle R² × fluence (J/sr)",
                  figure)
        axes[0].set_title("per unit area at the sphere")
        axes[1].set_title("per unit solid angle")
    width = int(12 * (6.0 * panels + 0.5))  # characters of a medium-size title line
    lines = [f"{name}: {what}", *textwrap.wrap(note, width),
             *textwrap.wrap(_geometry_note(layout), width)]
    figure.suptitle("\n".join(lines), fontsize="medium")
    _footer(figure, footer, int(width * 1.2))
    return figure


def plot_spectra(name, observers_of_group, spectra_of_group, layout, picks, spacing="log",
                 footer=None):
    """Spectral fluence of the picked points; frequency axis linear or log as the run's
    spacing, the log y axis cut at the numerical noise (see log_floor); `footer` (the run's
    safety note) goes below."""
    figure = _new_figure(8.0, 6.5)
    ax = figure.subplots()
    f_max = float(spectra_of_group["f"].max())
    f_unit, f_factor = pick_unit(f_max, FREQUENCY_UNITS)
    shown = []
    for point in picks:
        rows = spectra_of_group[spectra_of_group["point"] == point].sort_values("f")
        if rows.empty:
            continue
        values = rows["fluence"].to_numpy(dtype=float)
        shown.append(values)
        ax.plot(rows["f"].to_numpy(dtype=float) / f_factor, values,
                marker="o" if len(rows) < 3 else None, linewidth=1.0,
                label=point_label(observers_of_group, point, layout))
    if spacing == "log" and bool((spectra_of_group["f"] > 0).all()):
        ax.set_xscale("log")
    floor = log_floor(np.concatenate(shown)) if shown else None
    if floor is not None:
        ax.set_yscale("log")
        ax.set_ylim(bottom=floor)
    else:
        _sci(ax)
    ax.set_xlabel(f"frequency f ({f_unit})")
    ax.set_ylabel("spectral fluence F (J/(m²·Hz))")
    ax.grid(True, which="both", alpha=0.3)
    if layout is not None and layout.kind == "sphere":
        r2 = layout.radius_m ** 2
        right = ax.secondary_yaxis("right", functions=(lambda x: x * r2, lambda x: x / r2))
        right.set_ylabel("d²W/(df dΩ) = R² F (J/(Hz·sr))")
    handles, labels = ax.get_legend_handles_labels()
    figure.legend(handles, labels, loc="outside upper center", ncols=2, fontsize="small")
    total = spectra_of_group["point"].nunique()
    note = f" ({len(picks)} of {total} points)" if len(picks) < total else ""
    ax.set_title(f"{name}: spectral fluence F = 2ε₀c|Ẽ(f)|²{note}")
    _footer(figure, footer, 110)
    return figure


def describe_detector(record: dict | None) -> str:
    """One line on a detector from its run.json record: sensor (and load), chain, digitizer."""
    if not record:
        return ""
    sensor = record["sensor"]
    if sensor["kind"] == "electrode":
        text = f"electrode {sensor['area_m2'] * 1e6:.3g} mm², n̂ = {_vector(sensor['normal'])}"
        load = [_format_quantity(sensor["resistance_ohm"], OHM_UNITS, 4)
                if sensor["resistance_ohm"] is not None else None,
                _format_quantity(sensor["capacitance_f"], FARAD_UNITS, 4)
                if sensor["capacitance_f"] else None]
        text += ", load " + " ‖ ".join(part for part in load if part)
    elif sensor["kind"] == "effective_length":
        text = f"antenna h = {_vector(sensor['length_m'])} m"
    else:
        text = f"loop A = {_vector(sensor['area_m2'])} m²"
    if record.get("chain"):
        text += "; chain: " + " → ".join(element["kind"] for element in record["chain"])
    digitizer = record.get("digitizer")
    if digitizer:
        rate = _format_quantity(digitizer["rate_hz"], FREQUENCY_UNITS, 4).replace("Hz", "S/s")
        text += (f"; digitizer {rate}, "
                 f"{digitizer['bits']} bits, ±{digitizer['range_v'][1]:.4g} V")
    return text


def plot_detector_traces(names, voltages, digitized, records, max_curves, footer=None):
    """One panel per detector: its analog voltage (lines) and, with a digitizer, the
    digitized samples (dots joined by steps, same colour) for up to max_curves points."""
    figure = _new_figure(9.0, 1.2 + 2.3 * len(names))
    axes = np.atleast_1d(figure.subplots(len(names), 1, sharex=True, squeeze=False)[:, 0])
    shown = voltages[voltages["detector"].isin(names)]
    reference_s, unit_s, time_label = time_scale(shown["t"].to_numpy(dtype=float))
    for ax, name in zip(axes, names, strict=True):
        analog = shown[shown["detector"] == name]
        sampled = None if digitized is None else digitized[digitized["detector"] == name]
        points = np.unique(analog["point"].to_numpy())
        picks = representative_points(points, max_curves)
        for index, point in enumerate(picks):
            colour = f"C{index % 10}"
            rows = analog[analog["point"] == point].sort_values("t")
            ax.plot((rows["t"].to_numpy(dtype=float) - reference_s) / unit_s, rows["V"],
                    color=colour, linewidth=1.2, label=f"point {point}, analog")
            if sampled is not None and len(sampled):
                rows = sampled[sampled["point"] == point].sort_values("t")
                ax.step((rows["t"].to_numpy(dtype=float) - reference_s) / unit_s, rows["V"],
                        where="post", color=colour, alpha=0.6, linewidth=0.8, marker=".",
                        markersize=4, label=f"point {point}, digitized (code × LSB)")
        note = f" ({len(picks)} of {points.size} points)" if len(picks) < points.size else ""
        title = f"{name}{note}: {describe_detector(records.get(name))}"
        ax.set_title("\n".join(textwrap.wrap(title, 110)), fontsize="small")
        ax.set_ylabel("voltage V (V)")
        ax.grid(True, alpha=0.3)
        ax.legend(fontsize="x-small", loc="upper right")
        _sci(ax)
        ax.ticklabel_format(axis="x", useOffset=False)
    axes[-1].set_xlabel(time_label)
    figure.suptitle("detector voltages: analog on the field's time grid and digitized")
    _footer(figure, footer, 130)
    return figure


def band_share(band: np.ndarray, total: np.ndarray) -> tuple[float, float] | None:
    """(lowest, highest) band / total fluence over the points where the total is positive."""
    with np.errstate(divide="ignore", invalid="ignore"):
        share = band / total
    share = share[np.isfinite(share) & (total > 0)]
    return (float(share.min()), float(share.max())) if share.size else None


# ---------------------------------------------------------------------------------------
# The exporter


class PlotExporter:
    """PNG figures of every observer group."""

    name = "plots"
    description = ("PNG figures per observer group: field waveforms, fluence maps, spectra "
                   "and band maps (matplotlib)")
    requires = ("matplotlib",)

    def write(self, result, directory, options) -> list[str]:
        settings = parse_options(options)
        directory = pathlib.Path(directory)
        summary = getattr(result, "summary", None) or {}
        plans = [self._plan(name, result, summary, settings)
                 for name in result.observers["observer"].unique()]
        written = []
        for plan in plans:  # every option and band was checked before the first file
            written += self._draw(plan, directory, settings)
        return written + self._draw_detectors(result, summary, directory, settings)

    def _draw_detectors(self, result, summary, directory, settings) -> list[str]:
        """detector_voltages.png (then _2, _3 … for more than DETECTOR_PANELS detectors)."""
        voltages = getattr(result, "voltages", None)
        if voltages is None or not len(voltages):
            return []
        names = list(dict.fromkeys(voltages["detector"]))
        written = []
        for page, first in enumerate(range(0, len(names), DETECTOR_PANELS)):
            figure = plot_detector_traces(names[first:first + DETECTOR_PANELS], voltages,
                                          getattr(result, "digitized", None),
                                          summary.get("detectors") or {},
                                          settings.max_curves, summary.get("note"))
            suffix = "" if page == 0 else f"_{page + 1}"
            written.append(_save(figure, directory, f"detector_voltages{suffix}.png",
                                 settings.dpi))
        return written

    def _plan(self, name, result, summary, settings) -> dict:
        observers = result.observers[result.observers["observer"] == name]
        fields = result.fields[result.fields["observer"] == name]
        spectra = None
        if result.spectra is not None:
            spectra = result.spectra[result.spectra["observer"] == name]
            spectra = spectra if len(spectra) else None
        layout = grid_layout(observers, summary) if len(observers) > 1 else None
        band, spacing = None, "log"
        if spectra is not None:
            f = np.unique(spectra["f"].to_numpy(dtype=float))
            spacing = frequency_spacing(f, summary)
            band = settings.band_hz or (float(f.min()), float(f.max()))
            inside = int(np.count_nonzero((f >= band[0]) & (f <= band[1])))
            if settings.band_hz is not None and inside < 2:
                raise ConfigError(
                    f"{WHERE} band: [{band[0]:g}, {band[1]:g}] Hz holds {inside} of the "
                    f"frequencies computed for observer group '{name}' "
                    f"({f.min():g} to {f.max():g} Hz, {f.size} values); at least 2 are needed")
            if inside < 2:
                band = None  # a single frequency: nothing to integrate over
        table = getattr(result, "fluence", None)
        step_s = time_step_s(fields, summary)
        energy = fluence_by_point(None if table is None else table[table["observer"] == name],
                                  fields, step_s)
        return dict(name=name, observers=observers, fields=fields, spectra=spectra,
                    layout=layout, band=band, spacing=spacing, step_s=step_s, energy=energy,
                    footer=summary.get("note"))

    def _draw(self, plan, directory, settings) -> list[str]:
        name, layout, energy = plan["name"], plan["layout"], plan["energy"]
        observers, fields, spectra = plan["observers"], plan["fields"], plan["spectra"]
        stem = safe_stem(str(name))
        picks = representative_points(observers["point"].to_numpy(), settings.max_curves)
        written = []
        if len(fields):
            present = [p for p in picks if p in set(fields["point"])]
            figure = plot_waveforms(name, observers, fields, layout, present, plan["step_s"],
                                    plan["footer"])
            written.append(_save(figure, directory, f"{stem}_waveforms.png", settings.dpi))
        total = None
        if layout is not None and energy is not None:
            fluence, per_sr, method = energy
            total = values_on_grid(layout, fluence)
            if layout.kind == "sphere":
                per_sr = (values_on_grid(layout, per_sr) if per_sr is not None
                          else total * layout.radius_m ** 2)
            figure = plot_map(name, layout, total, "energy fluence ε₀c∫|E|²dt over the window",
                              method, per_sr, plan["footer"])
            written.append(_save(figure, directory, f"{stem}_fluence_map.png", settings.dpi))
        if spectra is not None:
            figure = plot_spectra(name, observers, spectra, layout, picks, plan["spacing"],
                                  plan["footer"])
            written.append(_save(figure, directory, f"{stem}_spectrum.png", settings.dpi))
        if spectra is not None and layout is not None and plan["band"] is not None:
            band = plan["band"]
            values = values_on_grid(layout, band_fluence(spectra, band))
            per_sr = None
            if layout.kind == "sphere":
                per_sr = (values_on_grid(layout, band_fluence(spectra, band, "dW_df_dOmega"))
                          if "dW_df_dOmega" in spectra.columns
                          else values * layout.radius_m ** 2)
            what = (f"fluence in {_format_quantity(band[0], FREQUENCY_UNITS)} – "
                    f"{_format_quantity(band[1], FREQUENCY_UNITS)}")
            note = "∫F df over the band (trapezoid rule on the computed frequencies)"
            share = band_share(values, total) if total is not None else None
            if share is not None:
                note += (f"; band / total: {100 * share[0]:.3g}–{100 * share[1]:.3g}\u00a0%; "
                         f"total {energy[2]}")
            figure = plot_map(name, layout, values, what, note, per_sr, plan["footer"])
            written.append(_save(figure, directory, f"{stem}_band_map.png", settings.dpi))
        return written


@lagfield.hookimpl
def lagfield_register_exporters():
    return [PlotExporter()]
