"""The run's resolution audit checks tracks in batches (those sharing sample times together)
and must count and word the same findings as checking each track on its own."""

from __future__ import annotations

import numpy as np
import reference
from scenarios import make_samples_module
from scipy import constants

from lagfield import resolution
from lagfield.kernels import audit
from lagfield.resolution import ResolutionAudit, check_resolution
from lagfield.tracks import Track


def mixed_tracks():
    """The shipped bend (a hard edge the audit reports) and pickup bunch, with and without
    momenta, plus coarse copies of the bend sampled every second and third sample."""
    samples = make_samples_module()
    tracks = []
    for table in (samples.make_bend_tracks(), samples.make_pickup_tracks(n_particles=5)):
        for particle, rows in table.groupby("particle", sort=True):
            t = rows["t"].to_numpy()
            pos = rows[["x", "y", "z"]].to_numpy()
            u = rows[["ux", "uy", "uz"]].to_numpy()
            tracks.append(Track(int(particle), t, pos, u, -constants.e, 1.0))
            tracks.append(Track(int(particle) + 1000, t, pos, None, -constants.e, 1.0))
            for every in (2, 3):
                tracks.append(Track(int(particle) + 1000 * every, t[::every], pos[::every],
                                    u[::every], -constants.e, 1.0))
    return tracks


def test_batched_audit_equals_one_track_at_a_time(monkeypatch):
    tracks = mixed_tracks()
    alone = [check_resolution(track) for track in tracks]
    found = [f for f in alone if f is not None]
    assert len(found) >= 3  # the scenario has findings to count
    worst = max(found, key=lambda f: f.ratio)
    for batch in (3, resolution.AUDIT_BATCH):
        monkeypatch.setattr(resolution, "AUDIT_BATCH", batch)
        audit = ResolutionAudit()
        for track in tracks:
            audit.add(track)
        warnings = audit.warnings()
        assert audit.findings == len(found)
        assert audit.worst == worst
        assert len(warnings) == 1 and worst.sentence() in warnings[0]


def test_a_clean_bunch_gives_no_warning():
    t = np.linspace(0.0, 1e-9, 40)
    tracks = []
    for k in range(5):
        pos = np.stack([1e-3 * k + 0.0 * t, 0.0 * t, 0.5 * constants.c * t], axis=1)
        u = np.tile([0.0, 0.0, 0.5 / np.sqrt(0.75)], (t.size, 1))
        tracks.append(Track(k, t, pos, u, -constants.e, 1.0))
    audit = ResolutionAudit()
    for track in tracks:
        audit.add(track)
    assert audit.warnings() == [] and audit.findings == 0


def test_overshoot_kernel_matches_its_twin():
    """kernels/audit.overshoots against the NumPy twin in tests/reference.py, on random
    values and on a probes array laid out as the spline gives it (not contiguous)."""
    rng = np.random.default_rng(4)
    beta = rng.standard_normal((5, 9, 3))
    probes = np.moveaxis(rng.standard_normal((8, 5, 7, 3)), 1, 0)  # (5, 8, 7, 3), strided
    assert not probes.flags["C_CONTIGUOUS"]
    out = np.empty((5, 8, 3))
    audit.overshoots(beta, probes, out)
    expected = reference.overshoots(beta, probes)
    assert np.array_equal(out, expected)
    assert (expected > 0).any() and (expected < 0).any()  # excursions and probes inside
