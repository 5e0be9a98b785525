"""The Filon-type quadrature of the spectra (kernels/filon.py) and its use in near-field runs.

- The weights are the exact integrals of the cubic Hermite basis against e^(−iθx), checked
  against scipy.integrate.quad (QUADPACK's oscillatory rule, weight="cos"/"sin") on both
  sides of the switch from power series to recurrence, to 1e-12.
- The sums are the exact transform of the Hermite interpolant of the samples (scipy's
  CubicHermiteSpline with the same slopes, integrated by quad), at gaps of up to ~20
  periods, to 1e-10 of the spectrum's scale.
- On a Gaussian pulse (transform in closed form: completing the square) sampled at 8 per σ,
  the error stays at the interpolation's level (~3e-4 of the peak) whatever the number of
  periods per gap: it does not grow with the frequency.
- A near-field run takes it where it is predicted cheaper, and its spectrum of a uniformly
  moving charge matches the closed form Ẽ_x = q/(4πε0) · 2ω/(γv²) · K1(ωb/(γv)),
  Ẽ_z = i q/(4πε0) · 2ω/(γ²v²) · K0(ωb/(γv)) (the transform of Jackson, Classical
  Electrodynamics, 3rd ed., eq. 11.152; closed form from memory, checked here against quad).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants, integrate, special
from scipy.interpolate import CubicHermiteSpline

from lagfield import accumulate, transforms
from lagfield.engine import FieldSettings, compute_fields
from lagfield.kernels import filon
from lagfield.observers import ObserverGroup
from lagfield.spectra import SpectrumSettings, filon_cheaper
from lagfield.tracks import Track

C = constants.c
ELECTRON_C = -constants.e
COULOMB = 1.0 / (4.0 * math.pi * constants.epsilon_0)
BASIS = [lambda x: 1 - 3 * x**2 + 2 * x**3, lambda x: 3 * x**2 - 2 * x**3,
         lambda x: x - 2 * x**2 + x**3, lambda x: x**3 - x**2]


def quad_transform(function, lo, hi, omega):
    """∫ function(x) e^(−iωx) dx over [lo, hi] by QUADPACK's oscillatory rule."""
    if omega == 0.0:
        return integrate.quad(function, lo, hi, epsabs=1e-15, epsrel=1e-12, limit=400)[0]
    kwargs = dict(wvar=omega, epsabs=1e-15, epsrel=1e-12, limit=400)
    re = integrate.quad(function, lo, hi, weight="cos", **kwargs)[0]
    im = -integrate.quad(function, lo, hi, weight="sin", **kwargs)[0]
    return re + 1j * im


@pytest.mark.parametrize("theta", [0.0, 1e-4, 0.1, filon.SERIES_BELOW * (1 - 1e-9),
                                   filon.SERIES_BELOW * (1 + 1e-9), 0.7, 3.0, 40.0, -2.0])
def test_hermite_weights_are_the_basis_integrals(theta):
    phase = complex(math.cos(theta), -math.sin(theta))
    weights = filon.hermite_weights(theta, phase)
    for basis, weight in zip(BASIS, weights, strict=True):
        assert abs(weight - quad_transform(basis, 0.0, 1.0, theta)) < 1e-12
    first = filon.first_moment(theta, phase)
    assert abs(first - quad_transform(lambda x: 1.0, 0.0, 1.0, theta)) < 1e-12


def _samples(rng, lo, hi, count):
    return np.sort(np.concatenate([[lo + 0.3, hi - 0.2], rng.uniform(lo + 0.3, hi - 0.2,
                                                                      count - 2)]))


def test_sums_integrate_the_hermite_interpolant_exactly():
    """Gaps of up to ~20 periods at the top frequency; a repeated time (a jump of E)
    included; the ends held constant to the window's edges."""
    rng = np.random.default_rng(4)
    x = _samples(rng, -5.0, 5.0, 24)
    x = np.insert(x, 12, x[11])  # a jump at x[11]
    e = np.stack([np.cos(x), np.sin(2 * x) * np.exp(-0.1 * x * x), x], axis=1)
    e[12:] += 0.5  # the jump
    slopes = np.empty_like(e)
    filon.node_slopes(x, e, slopes)
    omega = np.array([0.0, 0.3, 2.0, 17.0, 60.0])
    out = np.zeros((omega.size, 3), complex)
    filon.filon_sums(x, e, -5.0, 5.0, omega, out)
    for c in range(3):
        pieces = [(-5.0, x[0], lambda s, c=c: e[0, c] + 0 * s),
                  (x[-1], 5.0, lambda s, c=c: e[-1, c] + 0 * s)]
        for a, b in ((0, 12), (12, x.size)):  # either side of the jump
            spline = CubicHermiteSpline(x[a:b], e[a:b, c], slopes[a:b, c])
            pieces += [(x[j], x[j + 1], spline) for j in range(a, b - 1)]
        for k, w in enumerate(omega):
            expected = sum(quad_transform(f, lo, hi, w) for lo, hi, f in pieces)
            assert abs(out[k, c] - expected) < 1e-10 * 10.0, (c, w)


def test_gaussian_error_does_not_grow_with_the_frequency():
    """exp(−t²/2) sampled every 1/8 (unevenly) over ±12: the transform √(2π) e^(−ω²/2)
    (and of t·exp(−t²/2): −iω √(2π) e^(−ω²/2)); up to ω = 60 (~10 periods per gap) the
    error stays at the interpolation's level of the first periods."""
    rng = np.random.default_rng(1)
    x = _samples(rng, -12.0, 12.0, 24 * 8)
    e = np.zeros((x.size, 3))
    e[:, 0] = np.exp(-x**2 / 2)
    e[:, 1] = x * np.exp(-x**2 / 2)
    omega = np.linspace(0.0, 60.0, 121)
    out = np.zeros((omega.size, 3), complex)
    filon.filon_sums(x, e, -12.0, 12.0, omega, out)
    gauss = math.sqrt(2 * math.pi) * np.exp(-omega**2 / 2)
    error = np.maximum(np.abs(out[:, 0] - gauss), np.abs(out[:, 1] + 1j * omega * gauss))
    assert error.max() < 5e-4 * math.sqrt(2 * math.pi)
    # beyond the pulse's band what is left is the interpolant's own (its second derivative
    # jumps at the samples), which falls with the frequency
    assert error[omega >= 30].max() < error[omega <= 10].max()


def test_phase_carried_between_samples_stays_exact():
    """Many samples (the phase is carried by products, renewed every RENEW_EVERY): a
    constant field's transform over [lo, hi] is (e^(−iωlo) − e^(−iωhi))/(iω) exactly."""
    x = np.linspace(-1.0, 1.0, 20 * filon.RENEW_EVERY + 7)
    e = np.ones((x.size, 3))
    omega = np.array([1.0, 3e3, 1e5])
    out = np.zeros((omega.size, 3), complex)
    filon.filon_sums(x, e, -1.0, 1.0, omega, out)
    exact = (np.exp(1j * omega) - np.exp(-1j * omega)) / (1j * omega)
    np.testing.assert_allclose(out[:, 0], exact, rtol=0, atol=1e-12)


def test_chooser_prefers_filon_for_few_frequencies_over_long_windows():
    few = SpectrumSettings(np.geomspace(1e9, 1e12, 10))
    many = SpectrumSettings(np.geomspace(1e9, 1e12, 3000))
    window_s = 1e-9  # 1000 periods of the top frequency
    assert filon_cheaper([300] * 8, window_s, few)
    assert not filon_cheaper([30_000] * 8, window_s, many)
    assert not filon_cheaper([], window_s, few)


# -------------------------------------------------------------- a uniformly moving charge
GAMMA = 20.0
IMPACT_M = 0.02


def moving_charge_spectrum(frequencies_hz):
    """Ẽ_x, Ẽ_z at (b, 0, 0) of an electron moving along +z, z = vt (closed form, see the
    module's docstring)."""
    v = C * math.sqrt(1 - 1 / GAMMA**2)
    omega = 2 * math.pi * frequencies_hz
    k = omega * IMPACT_M / (GAMMA * v)
    scale = COULOMB * ELECTRON_C * 2 * omega / (GAMMA * v * v)
    return scale * special.k1(k), 1j * scale / GAMMA * special.k0(k)


def test_closed_form_of_the_moving_charge_matches_quadrature():
    v = C * math.sqrt(1 - 1 / GAMMA**2)
    width = IMPACT_M / (GAMMA * v)

    def field(t):  # (E_x, E_z) at (b, 0, 0) with the charge at z = vt (eq. 11.152)
        scale = COULOMB * ELECTRON_C * GAMMA / (IMPACT_M**2 + (GAMMA * v * t) ** 2) ** 1.5
        return scale * IMPACT_M, -scale * v * t

    edges = [0.0, 1.0, 10.0, 100.0, 1e3, 1e4]  # in pulse widths; E_x even, E_z odd in t
    for f in (0.2 / width / (2 * math.pi), 2.0 / width / (2 * math.pi)):
        closed = moving_charge_spectrum(np.array([f]))
        numeric = [0.0, 0.0]
        for lo, hi in zip(edges[:-1], edges[1:], strict=True):
            half = [quad_transform(lambda u, c=c: field(u * width)[c], lo, hi,
                                   2 * math.pi * f * width) for c in range(2)]
            numeric[0] += 2 * width * half[0].real
            numeric[1] += 2j * width * half[1].imag
        for c in range(2):
            assert abs(numeric[c] - closed[c][0]) < 1e-6 * abs(closed[c][0])


def _moving_charge_run(monkeypatch, filon_allowed: bool, coherent: bool = True,
                       taper: str = "none"):
    v = C * math.sqrt(1 - 1 / GAMMA**2)
    width_s = IMPACT_M / (GAMMA * v)
    half_window_s = 400 * width_s
    t = np.concatenate([-np.geomspace(3 * GAMMA**2 * half_window_s, 1e-13, 30), [0.0],
                        np.geomspace(1e-13, 2 * half_window_s, 15)])
    track = Track(0, t, np.stack([0 * t, 0 * t, v * t], axis=1),
                  np.tile([0.0, 0.0, GAMMA * v / C], (t.size, 1)), ELECTRON_C, 1.0)
    group = ObserverGroup("pickup", "points", np.array([[IMPACT_M, 0.0, 0.0]]), np.zeros(3))
    f = np.geomspace(0.05, 4.0, 12) / width_s / (2 * math.pi)
    if not filon_allowed:
        monkeypatch.setattr(accumulate, "filon_cheaper", lambda *a, **k: False)
    settings = FieldSettings(step_s=width_s, start_s=-half_window_s, stop_s=half_window_s,
                             max_frequency_hz=float(f.max()))
    (result,) = compute_fields([track], [group], settings,
                               spectrum=SpectrumSettings(f, coherent=coherent, taper=taper))
    return f, result


def test_near_field_spectrum_of_a_moving_charge_by_filon(monkeypatch):
    """The run takes the Filon-type quadrature (the window spans ~500 periods of the top
    frequency, and a bin a pulse width: refining to 16 samples a period would cost more)
    with about a third of the refined route's source samples, and
    matches the closed form to 1e-4 of its peak (the window's ±400 pulse widths cut the
    1/t³ tail at ~1e-5)."""
    f, result = _moving_charge_run(monkeypatch, True)
    spectrum = result.spectra.spectrum[0]  # (transforms are made when it is read)
    assert result.spectra.transforms == {"filon": 1}
    e_x, e_z = moving_charge_spectrum(f)
    peak = np.abs(e_x).max()
    assert np.abs(spectrum[:, 0] - e_x).max() < 1e-4 * peak
    assert np.abs(spectrum[:, 2] - e_z).max() < 1e-4 * peak
    assert np.abs(spectrum[:, 1]).max() < 1e-9 * peak
    _, refined = _moving_charge_run(monkeypatch, False)
    assert np.abs(refined.spectra.spectrum).max() > 0
    assert "filon" not in refined.spectra.transforms
    assert refined.source_samples > 2 * result.source_samples


@pytest.mark.parametrize(("coherent", "taper"), [(True, "none"), (False, "none"),
                                                 (True, "hann")])
def test_filon_and_refined_routes_agree(monkeypatch, coherent, taper):
    f, by_filon = _moving_charge_run(monkeypatch, True, coherent, taper)
    _, refined = _moving_charge_run(monkeypatch, False, coherent, taper)
    if coherent:
        ours, theirs = by_filon.spectra.spectrum, refined.spectra.spectrum
    else:
        ours, theirs = by_filon.spectra.fluence, refined.spectra.fluence
    assert np.abs(ours - theirs).max() < 2e-4 * np.abs(theirs).max()
    assert set(by_filon.spectra.transforms) == {"filon"}  # (counted once the sums are made)
    # the exact ∫|E|² dt over the window, made beside the spectra (incoherent) or apart
    assert by_filon.fluence.energy[0] > 0
    assert by_filon.fluence.energy == pytest.approx(refined.fluence.energy, rel=1e-5)


def test_cost_model_knows_the_route():
    assert transforms.COST.filon_s(1000, 10) == pytest.approx(
        1000 * 10 * transforms.COST.filon_per_term_s)


def test_run_summary_counts_the_routes(tmp_path):
    """run.json's group record says which quadrature made the spectra."""
    import pandas as pd

    import lagfield

    v = C * math.sqrt(1 - 1 / GAMMA**2)
    width_s = IMPACT_M / (GAMMA * v)
    t = np.concatenate([-np.geomspace(1e-6, 1e-13, 30), [0.0], np.geomspace(1e-13, 1e-9, 15)])
    u = GAMMA * v / C
    pd.DataFrame({"particle": 0, "t": t, "x": 0.0, "y": 0.0, "z": v * t, "ux": 0.0, "uy": 0.0,
                  "uz": u}).to_parquet(tmp_path / "tracks.parquet")
    run = {"tracks": {"path": "tracks.parquet", "charge": ELECTRON_C},
           "observers": [{"name": "pickup", "points": [[IMPACT_M, 0.0, 0.0]]}],
           "time": {"step": width_s, "start": -400 * width_s, "stop": 400 * width_s},
           "spectrum": {"frequencies": {"start": 0.05 / width_s / (2 * math.pi),
                                        "stop": 4.0 / width_s / (2 * math.pi), "count": 12,
                                        "spacing": "log"}}}
    signals = lagfield.run(run, base_dir=tmp_path, write=False)
    assert signals.summary["groups"]["pickup"]["spectra_routes"] == {"filon": 1}
