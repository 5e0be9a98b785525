"""What is in a track file, and whether its sampling resolves the radiation the motion
implies (`lagfield inspect TRACKS`).

Per particle the strongest bend is found from finite differences: velocity from u (or
from the positions), acceleration from the velocity, radius of curvature
rho = v² / |a_perp|. A charge on a bend of radius rho radiates up to about the critical
frequency omega_c = 3 γ³ c / (2 rho) (Jackson, Classical Electrodynamics, 3rd ed.,
eq. 14.85), over a formation time of about rho / (c γ) in source time. As common practice
the track step should be at most a quarter of that formation time for the motion spline
to reconstruct the bend.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants

from .tracks import iter_tracks
from .wording import plural

STEP_FRACTION = 0.25  # largest step / formation time (common practice)
MIN_TURN_RAD = 1e-9  # smaller turns per step count as straight motion
MAX_LISTED = 20  # problem sentences listed in a report


def inspect_tracks(path, **read_options) -> dict:
    """A JSON-serialisable summary of the track file at `path`; `read_options` as for
    `lagfield.read_tracks` (format, columns, units, charge, ...).

    Files without a charge column are inspected with the electron charge unless
    `charge` is given (the charge does not enter any figure here).
    """
    read_options.setdefault("charge", -constants.e)
    samples, spans, gammas, accelerations = [], [], [], []
    bends, problems, straight = [], [], 0
    has_momentum = False
    for track in iter_tracks(path, **read_options):
        has_momentum = track.u is not None
        facts = _analyse(track)
        samples.append(track.n_samples)
        spans.append((float(track.t_s[0]), float(track.t_s[-1])))
        gammas.extend(facts["gamma_range"])
        accelerations.append(facts["peak_acceleration"])
        if facts["bend"] is None:
            straight += 1
            continue
        bends.append(facts["bend"])
        if facts["problem"] is not None:
            problems.append(facts["problem"])
    problems.sort(key=lambda p: -p["factor"])
    strongest = min(bends, key=lambda b: b["radius_m"], default=None)
    return {
        "path": str(path),
        "n_particles": len(samples),
        "n_rows": int(sum(samples)),
        "has_momentum": has_momentum,
        "samples_per_particle": {"min": int(min(samples)), "median": float(np.median(samples)),
                                 "max": int(max(samples))},
        "time_span_s": {"start": min(s[0] for s in spans), "stop": max(s[1] for s in spans)},
        "lorentz_factor": {"min": _finite(min(gammas)) if gammas else None,
                           "max": _finite(max(gammas)) if gammas else None,
                           "from": "ux, uy, uz" if has_momentum else "chord speeds"},
        "peak_acceleration_m_s2": _finite(max(accelerations)),
        "n_straight": straight,
        "n_bent": len(bends),
        "strongest_bend": strongest,
        "max_critical_frequency_hz": max((b["critical_frequency_hz"] for b in bends),
                                         default=None),
        "step_fraction": STEP_FRACTION,
        "resolved": not problems,
        "n_problems": len(problems),
        "problems": problems[:MAX_LISTED],
    }


def inspect_run(run_file, **overrides) -> dict:
    """`inspect_tracks` of the track file a run file names, read with the run's [tracks]
    format, columns, units, charge and tolerances; `overrides` (e.g. format, charge,
    registry) take precedence. The report also names the run file."""
    from .config import load

    tracks = load(run_file).tracks
    options = {k: v for k, v in tracks.read_options().items() if v is not None}
    report = inspect_tracks(tracks.path, **{**options, **overrides})
    return {"run_file": str(run_file), **report}


def _analyse(track) -> dict:
    """Lorentz factor range, peak acceleration, strongest bend and the sampling problem
    (if any) of one track."""
    c = constants.c
    t, r = track.t_s, track.position_m
    facts = {"gamma_range": [], "peak_acceleration": 0.0, "bend": None, "problem": None}
    if len(t) < 2:
        return facts
    dt = np.diff(t)
    if track.u is not None:
        gamma = np.sqrt(1.0 + np.einsum("ij,ij->i", track.u, track.u))
        velocity = c * track.u / gamma[:, None]
        acceleration = _derivative(t, velocity, 1)
        facts["gamma_range"] = [float(gamma.min()), float(gamma.max())]
    else:
        chord = np.linalg.norm(np.diff(r, axis=0), axis=1) / dt
        chord_gamma = 1.0 / np.sqrt(1.0 - (chord / c) ** 2)
        facts["gamma_range"] = [float(chord_gamma.min()), float(chord_gamma.max())]
        velocity = _derivative(t, r, 1)
        acceleration = _derivative(t, r, 2)
        beta2 = np.einsum("ij,ij->i", velocity, velocity) / c**2
        # an interpolating spline may overshoot c between coarse samples: fall back to
        # the (slower) chord speeds there
        slow_beta2 = (np.maximum(np.r_[chord, chord[-1]], np.r_[chord[0], chord]) / c) ** 2
        gamma = 1.0 / np.sqrt(1.0 - np.where(beta2 < 1.0, beta2, slow_beta2))
    facts["peak_acceleration"] = float(np.linalg.norm(acceleration, axis=1).max())
    speed = np.linalg.norm(velocity, axis=1)
    moving = speed > 0
    direction = np.zeros_like(velocity)
    direction[moving] = velocity[moving] / speed[moving, None]
    a_along = np.einsum("ij,ij->i", acceleration, direction)
    a_perp = np.linalg.norm(acceleration - a_along[:, None] * direction, axis=1)
    step = np.maximum(np.r_[dt, dt[-1]], np.r_[dt[0], dt])  # widest step next to a sample
    # finite-difference noise: round-off of u, or of the positions over one step length
    noise = 256 * np.finfo(float).eps
    if track.u is None:
        extent = float(np.abs(r).max())
        with np.errstate(divide="ignore"):
            noise = noise * extent / (speed * step)
    with np.errstate(divide="ignore", invalid="ignore"):
        turn = a_perp * step / speed
    bent = moving & (turn > np.maximum(MIN_TURN_RAD, noise))
    if not bent.any():
        return facts
    radius = np.full_like(speed, np.inf)
    radius[bent] = speed[bent] ** 2 / a_perp[bent]
    k = int(np.argmin(radius))
    omega_c = 3.0 * gamma[k] ** 3 * c / (2.0 * radius[k])  # Jackson eq. 14.85
    facts["bend"] = {"particle": track.particle, "t_s": float(t[k]),
                     "radius_m": float(radius[k]), "gamma": float(gamma[k]),
                     "critical_frequency_hz": float(omega_c / (2 * math.pi))}
    needed = STEP_FRACTION * radius / (c * gamma)  # inf where straight
    ratio = step / needed
    j = int(np.argmax(ratio))
    if ratio[j] > 1.0:
        factor = math.ceil(ratio[j] * (1 - 1e-12))
        advice = f"write tracks at least {factor}x more often"
        if track.u is None:
            advice += " or provide ux, uy, uz"
        facts["problem"] = {
            "particle": track.particle, "t_s": float(t[j]), "step_s": float(step[j]),
            "needed_step_s": float(needed[j]), "factor": factor,
            "message": (f"particle {track.particle}: samples every {_si(step[j], 's')} but "
                        f"the bend at t = {t[j]:.4g} s needs at most {_si(needed[j], 's')}; "
                        f"{advice}."),
        }
    return facts


def _derivative(t, values, order):
    """d^order values / dt^order at the samples, from an interpolating spline of degree
    up to 5 (one-sided differences would blur a coarsely sampled bend)."""
    from scipy.interpolate import make_interp_spline

    degree = min(5, len(t) - 1)
    if degree < order:
        return np.zeros_like(values)
    return make_interp_spline(t, values, k=degree, axis=0).derivative(order)(t)


def format_report(report: dict) -> str:
    """The report of `inspect_tracks` as readable terminal text."""
    spp, span, gamma = (report["samples_per_particle"], report["time_span_s"],
                        report["lorentz_factor"])
    lines = [f"run file: {report['run_file']}"] if "run_file" in report else []
    lines += [
        f"track file: {report['path']}",
        f"particles: {report['n_particles']} ({plural(report['n_rows'], 'row')}; momentum "
        f"columns {'ux, uy, uz present' if report['has_momentum'] else 'absent'})",
        f"samples per particle: min {spp['min']}, median {spp['median']:g}, max {spp['max']}",
        f"time span: {span['start']:.6g} s to {span['stop']:.6g} s "
        f"({_si(span['stop'] - span['start'], 's')})",
    ]
    if gamma["min"] is not None:
        source = gamma["from"]
        if source == "chord speeds":
            source += ", which understate it where bends are sampled coarsely"
        lines.append(f"Lorentz factor: {gamma['min']:.6g} to {gamma['max']:.6g} "
                     f"(from {source})")
    lines.append(f"peak acceleration: {report['peak_acceleration_m_s2']:.4g} m/s^2")
    bend = report["strongest_bend"]
    if bend is None:
        lines.append("bends: none, every track is straight: nothing to resolve.")
        return "\n".join(lines)
    lines.append(
        f"strongest bend: particle {bend['particle']} at t = {bend['t_s']:.6g} s, radius "
        f"{_si(bend['radius_m'], 'm')}, Lorentz factor {bend['gamma']:.4g}, critical "
        f"frequency {_si(bend['critical_frequency_hz'], 'Hz')}")
    lines.append(f"highest critical frequency: {_si(report['max_critical_frequency_hz'], 'Hz')}"
                 f" ({plural(report['n_bent'], 'bent track')}, "
                 f"{plural(report['n_straight'], 'straight track')})")
    rule = (f"steps at most {report['step_fraction']:g} of the formation time rho/(c gamma), "
            "common practice")
    if report["resolved"]:
        lines.append(f"sampling: resolves every bend ({rule}).")
    else:
        lines.append(f"sampling: {plural(report['n_problems'], 'track')} too coarse ({rule}):")
        lines.extend(f"  {p['message']}" for p in report["problems"])
        hidden = report["n_problems"] - len(report["problems"])
        if hidden > 0:
            lines.append(f"  ... and {plural(hidden, 'more track')} like "
                         f"{'this' if hidden == 1 else 'these'}.")
    return "\n".join(lines)


_PREFIXES = [(1e12, "T"), (1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"),
             (1e-6, "µ"), (1e-9, "n"), (1e-12, "p"), (1e-15, "f"), (1e-18, "a")]


def _si(value: float, unit: str) -> str:
    """`value` with an SI prefix, e.g. 2.0e-12, "s" -> "2 ps"."""
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}"
    for scale, prefix in _PREFIXES:
        if abs(value) >= scale * (1 - 5e-4):
            return f"{value / scale:.3g} {prefix}{unit}"
    return f"{value:.3g} {unit}"


def _finite(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None
