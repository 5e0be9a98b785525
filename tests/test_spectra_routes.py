"""The routes of the spectrum sums (compiled direct sum, type-3 NUFFT, NUFFT cut into time
pieces; one transform per particle or one over a buffer of particles) give the same
spectrum, and the chooser takes the route its cost model predicts to be cheapest.

Agreement is required to 1e-9 of the spectrum's peak for a smooth pulse, and to 1e-9 of
Σ_j |v_j| (the largest value a sum could take) for arbitrary random samples: both well
above the NUFFT's requested tolerance (lagfield.transforms.NUFFT_TOLERANCE) and far below
any physical tolerance of tests/test_physics_spectra.py.
"""

from __future__ import annotations

import pickle

import numba
import numpy as np
import pytest
from analytic_fields import chirped_pulse
from hypothesis import given, settings
from hypothesis import strategies as st

from lagfield import spectra, transforms
from lagfield.engine import FieldSettings, compute_fields
from lagfield.observers import ObserverGroup
from lagfield.spectra import SpectrumSettings
from lagfield.tracks import Track

AGREEMENT = 1e-9


@pytest.fixture
def small_pieces(monkeypatch):
    """A NUFFT memory budget so small that every span is cut into several pieces."""
    monkeypatch.setattr(transforms, "NUFFT_MEMORY_BYTES", 256 * 64)


@pytest.mark.parametrize("spacing", ["log", "linear"])
def test_direct_and_nufft_routes_agree_on_a_pulse(spacing):
    t, e = chirped_pulse(20_000)
    f = spectra.frequency_list(1e12, 1e15, 120, spacing)
    direct = spectra.window_spectrum(t, e, t[0], t[-1], f, route="direct")
    nufft = spectra.window_spectrum(t, e, t[0], t[-1], f, route="nufft")
    peak = np.abs(direct).max()
    assert peak > 0
    assert np.abs(nufft - direct).max() <= AGREEMENT * peak


def test_nufft_cut_into_pieces_agrees_with_one_transform(small_pieces):
    t, e = chirped_pulse(20_000)
    f = np.geomspace(1e12, 1e15, 120)
    assert transforms.nufft_pieces(t[-1] - t[0], f.min(), f.max()) > 3
    whole = spectra.window_spectrum(t, e, t[0], t[-1], f, route="direct")
    pieces = spectra.window_spectrum(t, e, t[0], t[-1], f, route="nufft")
    assert np.abs(pieces - whole).max() <= AGREEMENT * np.abs(whole).max()


@settings(max_examples=40, deadline=None)
@given(n_samples=st.integers(1, 400), n_frequencies=st.integers(1, 40),
       span_exponent=st.floats(-15.0, -8.0), cycles_exponent=st.floats(-2.0, 4.0),
       decades=st.floats(0.0, 4.0), log=st.booleans(), seed=st.integers(0, 2**32 - 1),
       cut=st.booleans())
def test_routes_agree_on_random_samples(n_samples, n_frequencies, span_exponent,
                                        cycles_exponent, decades, log, seed, cut):
    """Random times over a span holding up to 1e4 periods of the top frequency (a run's
    sampling puts 16 samples in each), anywhere within one span of t = 0."""
    rng = np.random.default_rng(seed)
    span_s = 10.0**span_exponent
    t = span_s * (rng.random(n_samples) + rng.uniform(-1.0, 1.0))
    values = rng.standard_normal((n_samples, transforms.N_VECTORS))
    top = 10.0**cycles_exponent / span_s
    f = (np.geomspace if log else np.linspace)(top * 10.0**-decades, top, n_frequencies)
    direct = transforms.fourier_sums(t, values, f, "direct")
    with pytest.MonkeyPatch.context() as patch:
        if cut:  # a fine grid of at most 64 points per piece
            patch.setattr(transforms, "NUFFT_MEMORY_BYTES", 64 * 64)
        nufft = transforms.fourier_sums(t, values, f, "nufft")
    bound = np.abs(values).sum(axis=0)  # |S[k, c]| ≤ Σ_j |v[j, c]|
    assert np.all(np.abs(nufft - direct) <= AGREEMENT * bound)


def test_direct_sum_matches_its_definition():
    rng = np.random.default_rng(11)
    t = rng.random(50) * 1e-12 + 1e-9
    values = rng.standard_normal((50, 6))
    f = np.linspace(1e10, 3e12, 17)
    expected = np.exp(-2j * np.pi * np.outer(f, t)) @ values
    got = transforms.fourier_sums(t, values, f, "direct")
    assert np.abs(got - expected).max() <= 1e-12 * np.abs(values).sum()


# ------------------------------------------------------------------------ the chooser
CASES = [(10, 5, 1e-12), (2_000, 50, 1e-9), (100_000, 1_000, 1e-11),
         (100_000, 8, 1e-8), (500_000, 300, 1e-6), (3, 10_000, 1e-9)]


@pytest.mark.parametrize(("n", "n_f", "span_s"), CASES)
def test_chooser_takes_the_predicted_cheapest_route(n, n_f, span_s):
    f = np.geomspace(1e9, 1e15, n_f)
    predicted = {route: transforms.predicted_s(n, f, span_s, route) for route in
                 transforms.ROUTES}
    assert transforms.choose(n, f, span_s) == min(predicted, key=predicted.get)


def test_chooser_takes_each_route_somewhere():
    f_few = np.linspace(1e12, 2e12, 4)
    f_many = np.geomspace(1e9, 1e12, 2_000)
    assert transforms.choose(200, f_few, 1e-12) == "direct"
    assert transforms.choose(200_000, f_many, 1e-9) == "nufft"


def test_no_cliff_in_predicted_time():
    """The predicted time of the chosen route is continuous in the sample count: the
    route changes where the two predictions cross, not at a threshold."""
    f = np.geomspace(1e9, 1e12, 200)
    counts = np.unique(np.geomspace(10, 1e6, 400).astype(int))
    best = np.array([min(transforms.predicted_s(n, f, 1e-9, r) for r in transforms.ROUTES)
                     for n in counts])
    steps = best[1:] / best[:-1]
    ratio = counts[1:] / counts[:-1]  # at most 1.1
    assert np.all(steps <= ratio * 1.05)  # about proportional to N, never a jump of ×24
    assert {transforms.choose(n, f, 1e-9) for n in counts} == set(transforms.ROUTES)


def test_coherent_plan_takes_the_predicted_cheapest():
    model = transforms.CostModel(1e-8, 1e-3, 1e-9, 1e-6, 1e-8)
    f = np.geomspace(1e9, 1e12, 300)
    # particles overlapping in time: one transform over all of them costs least
    how, route = spectra.coherent_plan([50_000] * 6, [1e-9] * 6, 1.1e-9, f, model)
    assert (how, route) == ("together", "nufft")
    # particles far apart in time: the shared grid would be huge, one per particle wins
    how, routes = spectra.coherent_plan([50_000] * 2, [1e-9] * 2, 1e-3, f, model)
    assert how == "each" and routes == ["nufft", "nufft"]


# ---------------------------------------------------------------- the accumulator
def _helix_track(particle: int, phase: float) -> Track:
    """A 5 MeV electron on a helix (invented), 400 samples."""
    gamma = 10.8
    beta = np.sqrt(1 - 1 / gamma**2)
    omega = 2 * np.pi * 3e10
    radius = 0.2 * beta * 299792458.0 / omega
    t = np.linspace(0.0, 2e-10, 400)
    pos = np.stack([radius * np.cos(omega * t + phase), radius * np.sin(omega * t + phase),
                    0.97 * beta * 299792458.0 * t], axis=1)
    return Track(particle=particle, t_s=t, position_m=pos, u=None, charge_c=-1.602176634e-19)


def _far_group():
    points = np.array([[0.0, 0.0, 10.0], [0.5, 0.0, 10.0]])
    return ObserverGroup(name="ahead", kind="points", points_m=points, origin_m=np.zeros(3))


def _spectra(monkeypatch, buffer_samples: int, coherent: bool = True):
    monkeypatch.setattr(spectra, "SPECTRUM_BUFFER_SAMPLES", buffer_samples)
    tracks = [_helix_track(i, 0.7 * i) for i in range(4)]
    f = np.geomspace(1e10, 1e12, 30)
    (result,) = compute_fields(tracks, [_far_group()], FieldSettings(step_s=1e-13,
                                                                      far_field=True),
                               spectrum=SpectrumSettings(f, coherent=coherent))
    return result.spectra


def test_buffered_particles_give_the_spectrum_of_one_transform_each(monkeypatch):
    each = _spectra(monkeypatch, 1).spectrum  # flushed after every particle
    together = _spectra(monkeypatch, 10**9).spectrum  # all four in one buffer
    assert np.abs(together).max() > 0
    assert np.abs(together - each).max() <= AGREEMENT * np.abs(each).max()


def test_a_pickled_accumulator_carries_its_buffered_particles(monkeypatch):
    accumulator = _spectra(monkeypatch, 10**9)
    assert accumulator._pending  # nothing transformed yet
    copy = pickle.loads(pickle.dumps(accumulator))
    assert not accumulator._pending and not copy._pending
    assert np.array_equal(copy.spectrum, accumulator.spectrum)
    assert np.abs(copy.spectrum).max() > 0


@pytest.mark.parametrize("coherent", [True, False], ids=["coherent", "incoherent"])
def test_spectra_do_not_depend_on_the_number_of_threads(coherent):
    """Points are transformed in as many threads as numba has: one thread and two give the
    same spectra and transform counts, bit for bit (each point's sums are made alone)."""
    tracks = [_helix_track(i, 0.7 * i) for i in range(3)]
    group = ObserverGroup(name="near", kind="points", origin_m=np.zeros(3),
                          points_m=np.array([[0.0, 0.0, 0.5], [0.05, 0.0, 0.4],
                                             [0.0, 0.08, 0.6]]))
    spectrum = SpectrumSettings(np.geomspace(1e10, 1e12, 30), coherent=coherent)
    previous = numba.get_num_threads()
    results = []
    try:
        for threads in (1, 2):
            numba.set_num_threads(threads)
            (result,) = compute_fields(tracks, [group], FieldSettings(step_s=1e-13),
                                       spectrum=spectrum)
            results.append(result.spectra)
    finally:
        numba.set_num_threads(previous)
    one, two = results
    values = (one.spectrum, two.spectrum) if coherent else (one.fluence, two.fluence)
    assert np.abs(values[0]).max() > 0.0
    assert np.array_equal(*values)
    assert one.transforms == two.transforms
    assert one.transforms["expansion"] == 0  # the per-point path, in threads


@pytest.mark.parametrize("route", ["transforms", "expansion"])
@pytest.mark.parametrize("coherent", [True, False], ids=["coherent", "incoherent"])
def test_far_field_sums_use_the_transverse_components(monkeypatch, coherent, route):
    """In the far field the radiation field is transverse (E·n = 0), so the sums (by the
    transforms or by the expansion) take its two components across n: the spectrum has no
    component along n (to rounding) and equals that of all three components, to AGREEMENT
    of its peak."""
    monkeypatch.setattr(spectra.SpectrumAccumulator, "_expansion_cheaper",
                        lambda *args: route == "expansion")
    projected = _spectra(monkeypatch, 10**9, coherent)
    values = projected.spectrum if coherent else projected.fluence
    expected = {"expansion"} if route == "expansion" else {"direct", "nufft"}
    assert set(projected.transforms) <= expected and projected.transforms
    assert projected._across.shape == (2, 2, 3)
    monkeypatch.setattr(spectra, "transverse_bases", lambda directions: np.empty((0, 2, 3)))
    full = _spectra(monkeypatch, 10**9, coherent)
    assert full._across.shape[0] == 0  # all three components
    reference = full.spectrum if coherent else full.fluence
    peak = np.abs(reference).max()
    assert peak > 0
    assert np.abs(values - reference).max() <= AGREEMENT * peak
    if coherent:
        n = projected.geometry.targets
        along = np.einsum("pkc,pc->pk", values, n)
        assert np.abs(along).max() <= 1e-12 * peak


def test_transverse_bases_are_orthonormal_and_across_n():
    rng = np.random.default_rng(2)
    n = rng.standard_normal((50, 3))
    n = np.concatenate([n, np.eye(3), -np.eye(3)])
    n /= np.linalg.norm(n, axis=1)[:, None]
    bases = spectra.transverse_bases(n)
    for direction, (u0, u1) in zip(n, bases, strict=True):
        matrix = np.stack([u0, u1, direction])
        np.testing.assert_allclose(matrix @ matrix.T, np.eye(3), atol=1e-14)
