"""The Jacobi–Anger expansion route of the spectrum sums (kernels/expansion.py) and the
compiled per-point spectra and energies (kernels/point_spectra.py, kernels/energy.py).

Bessel functions are checked against scipy.special.jv (a reference library); the sums
against their definition Σ_j v_j exp(−iω_k x_j) evaluated with numpy; the accumulator's
expansion route against the transform route (direct sum or NUFFT, whose agreement with the
definition tests/test_spectra_routes.py checks) to EXPANSION_AGREEMENT of the peak.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special
from test_spectra_routes import _far_group, _helix_track

from lagfield import spectra, transforms
from lagfield.engine import FieldSettings, compute_fields
from lagfield.kernels import expansion
from lagfield.spectra import SpectrumSettings

BESSEL_TOLERANCE = 1e-13  # absolute, |J_n| ≤ 1
SUM_TOLERANCE = 1e-12  # of Σ_j |v_j|: the tail bound is 1e-15, rounding grows with orders
EXPANSION_AGREEMENT = 1e-10  # of the peak: the NUFFT route's own tolerance is 1e-11 of
# its largest input, the quadrature is the same on both routes


@pytest.mark.parametrize("z_max", [0.3, 4.0, 25.0, 300.0])
def test_bessel_table_matches_scipy(z_max):
    z = np.concatenate([np.linspace(-z_max, z_max, 401), [0.0, 1e-12, -3e-9, 2e-6]])
    orders = expansion.orders_for(z_max)
    table = np.empty((orders + 1, z.size))
    expansion.bessel_table(z, orders, table)
    reference = special.jv(np.arange(orders)[:, None], z[None, :])
    assert np.max(np.abs(table[:orders] - reference)) <= BESSEL_TOLERANCE


@pytest.mark.parametrize("z_max", [0.5, 7.0, 60.0, 400.0])
def test_dropped_orders_are_below_the_tail_tolerance(z_max):
    orders = expansion.orders_for(z_max)
    assert orders > z_max
    tail = 2.0 * np.sum(np.abs(special.jv(np.arange(orders, orders + 60), z_max)))
    assert tail <= expansion.TAIL_TOLERANCE


@pytest.mark.parametrize("vectors", [expansion.VECTORS, 4])  # 4: transverse far fields
@pytest.mark.parametrize("spacing", ["linear", "log"])
@pytest.mark.parametrize("periods", [0.2, 3.0, 40.0])
def test_expansion_sums_match_their_definition(spacing, periods, vectors):
    rng = np.random.default_rng(11)
    n, top_hz = 700, 1e15
    f = spectra.frequency_list(top_hz / 50, top_hz, 90, spacing)
    half_span = 0.5 * periods / top_hz
    x = np.sort(rng.uniform(-half_span, half_span, n))
    values = rng.standard_normal((vectors, n))
    centre, half_width = transforms.expansion_band(f)
    orders = transforms.expansion_orders(f, half_span)
    weights_re, weights_im = expansion.chebyshev_weights(2 * np.pi * f, centre, half_width,
                                                         orders)
    out_re = np.empty((expansion.VECTORS, f.size))
    out_im = np.empty((expansion.VECTORS, f.size))
    expansion.expansion_sums(x, values, centre, half_width, weights_re, weights_im,
                             np.empty((orders + 1, n)), out_re, out_im)
    definition = values @ np.exp(-2j * np.pi * np.outer(x, f))
    scale = np.abs(values).sum(axis=1).max()
    sums = out_re[:vectors] + 1j * out_im[:vectors]
    assert np.max(np.abs(sums - definition)) <= SUM_TOLERANCE * scale


def test_expansion_cost_grows_with_orders_not_frequencies():
    f_few = np.linspace(1e14, 1e15, 10)
    f_many = np.linspace(1e14, 1e15, 10_000)
    half_span = 2e-15
    assert transforms.expansion_orders(f_few, half_span) == transforms.expansion_orders(
        f_many, half_span)
    assert transforms.expansion_orders(f_few, 10 * half_span) > transforms.expansion_orders(
        f_few, half_span)


def _helix_spectra(monkeypatch, coherent: bool, route_expansion: bool, taper: str,
                   far: bool):
    monkeypatch.setattr(spectra.SpectrumAccumulator, "_expansion_cheaper",
                        lambda self, batch, halves, coherent: route_expansion)
    tracks = [_helix_track(i, 0.7 * i) for i in range(3)]
    f = np.linspace(2e10, 1e12, 40)
    settings = FieldSettings(step_s=1e-13, far_field=far, max_frequency_hz=float(f.max()))
    (result,) = compute_fields(tracks, [_far_group()], settings,
                               spectrum=SpectrumSettings(f, coherent=coherent, taper=taper))
    values = result.spectra.spectrum if coherent else result.spectra.fluence  # flushed
    return values, result.spectra.transforms


@pytest.mark.parametrize(("taper", "far"), [("none", True), ("hann", True), ("none", False)])
@pytest.mark.parametrize("coherent", [True, False])
def test_expansion_route_agrees_with_the_transforms(monkeypatch, coherent, taper, far):
    expected, routes_taken = _helix_spectra(monkeypatch, coherent, False, taper, far)
    got, expansions = _helix_spectra(monkeypatch, coherent, True, taper, far)
    assert expansions["expansion"] > 0 and "expansion" not in routes_taken
    assert np.abs(expected).max() > 0
    assert np.abs(got - expected).max() <= EXPANSION_AGREEMENT * np.abs(expected).max()
