"""What is in a track file, whether `run` accepts its tracks, and whether its sampling
resolves the motion (`lagfield inspect TRACKS | RUN.toml`).

Validity is decided by the very functions `run` uses: the reader's checks and
`motion.checked_motion` (the slip of positions against momenta, the speed below c) at the
time scale the run resolves. With a run file that is the run's `resolution_s`; without one
it is each track's median sample spacing, and the report says so. A track `run` refuses is
an error here with the same message; a track `run` accepts is never called invalid.
Resolution findings are those of `lagfield.resolution`, which `run` writes to run.json.

The strongest bend is measured on the samples themselves, interval by interval: the turn
φ between the sampled directions of motion (from ux, uy, uz) and the chord c between the
positions give the radius ρ = c / (2 sin(φ/2)), exact on an arc; without momenta, the
circle through three neighbouring positions. An interval that straddles a hard field edge
turns less than an arc would, so it never shows a bend sharper than the magnet's. A charge
on a bend of radius ρ radiates up to about the critical frequency ω_c = 3γ³c/(2ρ)
(Jackson, Classical Electrodynamics, 3rd ed., eq. 14.85).
"""

from __future__ import annotations

import math
import pathlib

import numpy as np
from scipy import constants

from .errors import MotionError
from .motion import SLIP_FRACTION, checked_motion
from .resolution import check_resolution
from .tracks import iter_tracks
from .wording import plural

MIN_TURN_RAD = 1e-9  # smaller turns per interval count as straight motion
# a larger turn within one interval (sin of half of it) is a reversal or a stop, not a bend
MAX_HALF_TURN_SIN = 0.5
MAX_LISTED = 20  # sentences listed per kind in a report


def inspect_tracks(path, *, resolution_s=None, motion_options=None, **read_options) -> dict:
    """A JSON-serialisable summary of the track file at `path`; `read_options` as for
    `lagfield.read_tracks` (format, columns, units, charge, ...).

    resolution_s: the time scale a run resolves (`FieldSettings.resolution_s()`); None:
    each track's median sample spacing. motion_options: keyword options of `Motion`
    (degree, smoothing_m, u_offset_s) as the run would use them. Files without a charge
    column are inspected with the electron charge unless `charge` is given (the charge
    does not enter any figure here).
    """
    read_options.setdefault("charge", -constants.e)
    read_options.setdefault("min_samples", 2)
    motion_options = dict(motion_options or {})
    degree = motion_options.get("degree", 5)
    samples, spans, gammas, accelerations = [], [], [], []
    bends, slips, refused, findings = [], [], [], []
    has_momentum, straight = False, 0
    for track in iter_tracks(path, **read_options):
        has_momentum = track.u is not None
        samples.append(track.n_samples)
        spans.append((float(track.t_s[0]), float(track.t_s[-1])))
        facts = _analyse(track)
        gammas.extend(facts["gamma_range"])
        accelerations.append(facts["peak_acceleration"])
        if facts["bend"] is None:
            straight += 1
        else:
            bends.append(facts["bend"])
        scale = resolution_s if resolution_s is not None else float(np.median(
            np.diff(track.t_s)))
        try:
            motion = checked_motion(track, scale, path=path, **motion_options)
        except MotionError as error:
            refused.append({"particle": track.particle, "message": str(error)})
            continue
        report = motion.slip
        if report is not None:
            i = report.worst()
            slips.append({"particle": track.particle, "t_s": float(report.t_s[i]),
                          "slip_s": float(report.slip_s[i]), "scale_s": scale,
                          "fraction": float(report.slip_s[i] / scale)})
        finding = check_resolution(track, degree)
        if finding is not None:
            findings.append({"particle": finding.particle, "t_s": finding.t_s,
                             "factor": finding.factor, "message": finding.sentence()})
    slips.sort(key=lambda p: -p["fraction"])
    findings.sort(key=lambda p: -p["factor"])
    strongest = min(bends, key=lambda b: b["radius_m"], default=None)
    return {
        "path": str(path),
        "source": _source_facts(path, read_options),
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
        "slip_judged_against": ("the run's resolution" if resolution_s is not None
                                else "each track's median sample spacing (no run file)"),
        "resolution_s": resolution_s,
        "slip_fraction_allowed": SLIP_FRACTION,
        "largest_slips": slips[:MAX_LISTED],
        "valid": not refused,
        "n_refused": len(refused),
        "refused": refused[:MAX_LISTED],
        "resolved": not findings,
        "n_problems": len(findings),
        "problems": findings[:MAX_LISTED],
    }


def inspect_run(run_file, **overrides) -> dict:
    """`inspect_tracks` of the track file a run file names, read with the run's [tracks]
    format, columns, units and charge, judged with the run's motion settings and
    resolution; `overrides` (e.g. format, charge, registry) take precedence. The report
    also names the run file."""
    from .config import load
    from .runner import settings_from

    config = load(run_file)
    tracks = config.tracks
    options = {k: v for k, v in tracks.read_options().items() if v is not None}
    settings, _ = settings_from(config)
    motion_options = {"degree": settings.degree, "extend": settings.extend,
                      "smoothing_m": settings.smoothing_m, "u_offset_s": settings.u_offset_s}
    report = inspect_tracks(tracks.path, resolution_s=settings.resolution_s(),
                            motion_options=motion_options, **{**options, **overrides})
    return {"run_file": str(run_file), **report}


def _analyse(track) -> dict:
    """Lorentz factor range, peak acceleration and strongest bend of one track."""
    c = constants.c
    t, r = track.t_s, track.position_m
    facts = {"gamma_range": [], "peak_acceleration": 0.0, "bend": None}
    dt = np.diff(t)
    chord = np.diff(r, axis=0)
    chord_m = np.linalg.norm(chord, axis=1)
    if track.u is not None:
        gamma = np.sqrt(1.0 + np.einsum("ij,ij->i", track.u, track.u))
        velocity = c * track.u / gamma[:, None]
    else:
        speed = np.minimum(chord_m / dt, c * (1 - 1e-16))
        chord_gamma = 1.0 / np.sqrt(1.0 - (speed / c) ** 2)
        gamma = np.maximum(np.r_[chord_gamma, chord_gamma[-1]], np.r_[chord_gamma[0],
                                                                        chord_gamma])
        velocity = np.r_[chord / dt[:, None], chord[-1:] / dt[-1]]
    facts["gamma_range"] = [float(gamma.min()), float(gamma.max())]
    accel = np.linalg.norm(np.diff(velocity, axis=0), axis=1) / dt
    facts["peak_acceleration"] = float(accel.max()) if accel.size else 0.0
    radius, k = _sampled_radius(track, velocity, chord, chord_m)
    if k is None:
        return facts
    g = float(0.5 * (gamma[k] + gamma[k + 1]))
    omega_c = 3.0 * g**3 * c / (2.0 * radius)  # Jackson eq. 14.85
    facts["bend"] = {"particle": track.particle, "t_s": float(0.5 * (t[k] + t[k + 1])),
                     "radius_m": float(radius), "gamma": g,
                     "critical_frequency_hz": float(omega_c / (2 * math.pi))}
    return facts


def _sampled_radius(track, velocity, chord, chord_m):
    """(radius_m, interval) of the sharpest bend the samples show, or (inf, None): from
    the turn between sampled velocities over each chord (with momenta), else from the
    circle through three neighbouring positions (the interval after its first point)."""
    if track.u is not None:
        speed = np.linalg.norm(velocity, axis=1)
        unit = np.divide(velocity, speed[:, None], out=np.zeros_like(velocity),
                         where=speed[:, None] > 0)
        half = 0.5 * np.linalg.norm(unit[1:] - unit[:-1], axis=1)  # sin(φ/2)
        floor, limit = MIN_TURN_RAD, MAX_HALF_TURN_SIN
    else:
        if chord.shape[0] < 2:
            return math.inf, None
        a, b = chord[:-1], chord[1:]
        both = np.linalg.norm(a, axis=1) * np.linalg.norm(b, axis=1)
        # circumradius |a||b||a+b| / (2|a×b|); sin of the turn between the chords
        half = np.divide(np.linalg.norm(np.cross(a, b), axis=1), both,  # sin of the turn
                         out=np.zeros(len(a)), where=both > 0)
        half[np.einsum("ij,ij->i", a, b) <= 0] = 1.0  # turned by 90° or more: a reversal
        limit = 2 * MAX_HALF_TURN_SIN * math.sqrt(1 - MAX_HALF_TURN_SIN**2)  # the same turn
        chord_m = np.linalg.norm(a + b, axis=1)
        extent = float(np.abs(track.position_m).max())
        floor = max(MIN_TURN_RAD, 256 * np.finfo(float).eps * extent
                    / max(float(chord_m.min()), 1e-300))
    bent = (half > floor) & (half < limit) & (chord_m > 0)
    if not bent.any():
        return math.inf, None
    radius = np.full(half.shape, np.inf)
    radius[bent] = chord_m[bent] / (2.0 * half[bent])
    k = int(np.argmin(radius))
    return float(radius[k]), k


def _source_facts(path, read_options) -> dict | None:
    """What the importer tells cheaply about the file through its optional
    `describe(path, options)` (label -> text; an openPMD series: species, iterations), or
    None."""
    from .registry import contained, get_registry

    registry = read_options.get("registry") or get_registry()
    name = read_options.get("format")
    info = registry.importer_info(name) if name else registry.importer_for(pathlib.Path(path))
    describe = getattr(getattr(info, "plugin", None), "describe", None)
    if describe is None:
        return None
    with contained(info, f"describing {path}"):
        return dict(describe(path, dict(read_options.get("options") or {})))


def format_report(report: dict) -> str:
    """The report of `inspect_tracks` as readable terminal text."""
    spp, span, gamma = (report["samples_per_particle"], report["time_span_s"],
                        report["lorentz_factor"])
    lines = [f"run file: {report['run_file']}"] if "run_file" in report else []
    lines += [
        f"track file: {report['path']}",
        *([f"source: {'; '.join(f'{k} {v}' for k, v in report['source'].items())}"]
          if report.get("source") else []),
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
    lines.append(f"peak acceleration: {report['peak_acceleration_m_s2']:.4g} m/s^2 "
                 "(between samples)")
    bend = report["strongest_bend"]
    if bend is None:
        lines.append("bends: none, every track is straight.")
    else:
        lines.append(
            f"strongest bend: particle {bend['particle']} at t = {bend['t_s']:.6g} s, radius "
            f"{_si(bend['radius_m'], 'm')}, Lorentz factor {bend['gamma']:.4g}, critical "
            f"frequency {_si(bend['critical_frequency_hz'], 'Hz')} (from the samples)")
        lines.append(f"highest critical frequency: "
                     f"{_si(report['max_critical_frequency_hz'], 'Hz')} "
                     f"({plural(report['n_bent'], 'bent track')}, "
                     f"{plural(report['n_straight'], 'straight track')})")
    lines += _slip_lines(report)
    if report["resolved"]:
        lines.append("sampling: resolves the motion of every track.")
    else:
        lines.append(f"sampling: {plural(report['n_problems'], 'track')} not resolved "
                     "(README, 'Motion between samples'):")
        lines.extend(f"  {p['message']}" for p in report["problems"])
        lines += _hidden(report["n_problems"], len(report["problems"]))
    return "\n".join(lines)


def _slip_lines(report: dict) -> list[str]:
    against = report["slip_judged_against"]
    if report["resolution_s"] is not None:
        against += f" ({_si(report['resolution_s'], 's')})"
    lines = []
    if report["largest_slips"]:
        worst = report["largest_slips"][0]
        lines.append(f"slip of positions against momenta: largest {_si(worst['slip_s'], 's')} "
                     f"(particle {worst['particle']} at t = {worst['t_s']:.6g} s), "
                     f"{worst['fraction']:.3g} of {against}; a run refuses a track above "
                     f"{report['slip_fraction_allowed']:g} of its resolution")
    if report["valid"]:
        lines.append(f"validity: every track is accepted (judged against {against}).")
    else:
        lines.append(f"validity: {plural(report['n_refused'], 'track')} refused, judged "
                     f"against {against}:")
        lines.extend(f"  error: {p['message']}" for p in report["refused"])
        lines += _hidden(report["n_refused"], len(report["refused"]))
    return lines


def _hidden(total: int, listed: int) -> list[str]:
    hidden = total - listed
    return [f"  ... and {plural(hidden, 'more track')}."] if hidden > 0 else []


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
