"""The laser-plasma sample scenario: betatron motion in an ion channel written as an openPMD
series by sample_data/make_samples.py, read back by the openpmd importer, and its on-axis
spectrum against the undulator relation.

References: ω_β = ω_p/√(2γ) for an electron in an ion channel and the betatron strength
K = γ r_β ω_β / c (common practice for plasma channels); the on-axis fundamental
f1 = 2γ²/(1 + K²/2) · f_β, the undulator relation of the X-ray Data Booklet, sec. 2.1.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scenarios import make_samples_module
from scipy import constants

import lagfield

pytest.importorskip("openpmd_api")

REPOSITORY = Path(__file__).resolve().parents[1]
N_PERIODS = 10


@pytest.fixture(scope="module")
def samples():
    """sample_data/make_samples.py as a module."""
    return make_samples_module()


def test_plasma_frequency_of_the_generator(samples):
    """ω_p = √(n e²/(ε0 m)) = 5.64e13 rad/s at 1e18 cm⁻³ (NRL Plasma Formulary: ω_pe =
    5.64e4 √n[cm⁻³] rad/s; number from memory)."""
    params = samples.plasma_parameters(1e18, 100.0, 1e-6)
    assert params["omega_p_rad_s"] == pytest.approx(5.64e4 * math.sqrt(1e18), rel=1e-3)
    assert params["omega_beta_rad_s"] == pytest.approx(params["omega_p_rad_s"] / math.sqrt(200))


def test_shipped_series_is_the_documented_bunch(samples):
    """sample_data/plasma/bunch.h5 (compressed HDF5) reads as sample_data/README.md describes
    it: 300 electrons, 3 betatron periods of 16 samples each (49 iterations), momenta half a
    step early, and its samples equal a fresh generation from the same seed."""
    from lagfield.tracks import read_tracks

    tracks = read_tracks(REPOSITORY / "sample_data" / "plasma" / "bunch.h5")
    bunch = samples.make_plasma_bunch(300, samples_per_period=16)
    assert len(tracks) == 300
    assert tracks.u_offset_s == pytest.approx(-0.5 * bunch["dt_s"], rel=1e-12)
    for index, track in enumerate(tracks):
        assert track.particle == index + 1 and track.t_s.size == 49
        np.testing.assert_allclose(track.position_m, bunch["position_m"][index], rtol=0,
                                   atol=1e-15)
        np.testing.assert_allclose(track.u, bunch["u"][index], rtol=1e-13)


@pytest.mark.slow
def test_on_axis_fundamental_is_the_undulator_relation(samples, tmp_path):
    """One electron (γ = 100, r_β = 0.1 µm, so K = 0.13) from the scenario's generator over
    10 betatron periods: the peak of its on-axis spectrum lies at 2γ²/(1 + K²/2) · f_β to
    1 % (the line is 1/N = 10 % wide; tolerance 1/10 of it)."""
    bunch = samples.make_plasma_bunch(1, gamma=100.0, energy_spread=0.0, radius_m=1e-7,
                                      n_periods=N_PERIODS, samples_per_period=24)
    samples.write_openpmd_series(tmp_path / "one.h5", samples.plasma_steps(bunch),
                                 u_offset_s=bunch["u_offset_s"])
    gamma = 100.0
    omega_b = bunch["params"]["omega_p_rad_s"] / math.sqrt(2.0 * gamma)
    k_value = gamma * 1e-7 * omega_b / constants.c
    assert k_value < 0.2  # the small-K regime the line is checked in
    f1 = 2.0 * gamma**2 / (1.0 + k_value**2 / 2.0) * omega_b / (2.0 * math.pi)
    run = {"tracks": {"path": "one.h5", "format": "openpmd"},
           "observers": [{"name": "axis", "points": [[0.0, 0.0, 1.0]]}],
           "fields": {"far_field": True},
           "time": {"step": 1.0 / (16.0 * f1)},
           "spectrum": {"frequencies": {"start": 0.7 * f1, "stop": 1.3 * f1, "count": 601,
                                        "spacing": "linear"}}}
    result = lagfield.run(run, base_dir=tmp_path, write=False)
    spectra = result.spectra
    f = spectra["f"].to_numpy()
    peak = f[np.argmax(spectra["fluence"].to_numpy())]
    assert peak == pytest.approx(f1, rel=0.01)
