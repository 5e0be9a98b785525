"""The openPMD importer: series written here with openpmd-api (the standard's own library)
from an analytic helix, read back through lagfield, and its clear errors.

The helix is an electron at γ = 50 in a uniform magnetic field along z: r = (R cos φ,
R sin φ, β_z c t), φ = ω t, ω = β⊥ c / R, u = γ β exactly (Jackson, Classical
Electrodynamics, 3rd ed., sec. 12.2, motion in a uniform static magnetic field). The series
stores what a particle-in-cell code stores: positions in µm (unitSI 1e-6) relative to a
positionOffset in mm (unitSI 1e-3), momenta in kg·m/s with the electron mass (CODATA 2018,
scipy.constants) and sampled half a step early (momentum timeOffset = −dt/2), times in fs
(timeUnitSI 1e-15), and ids joining a particle's samples across iterations.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from analytic_fields import exact_bin_averages
from scipy import constants

import lagfield
from lagfield.tracks import read_tracks

io = pytest.importorskip("openpmd_api")

C = constants.c
M_E = constants.m_e
GAMMA = 50.0
RADIUS_M = 1e-4
BETA_Z_FRACTION = 0.9
N_STEPS = 48
OFFSET_MM = np.array([2.0, -1.5, 0.5])  # positionOffset, in mm
TIME_UNIT_S = 1e-15
IDS = (101, 102, 103)
LATE_ID, LATE_SPAN = 103, (6, 40)  # particle 103 appears at iteration 6, leaves after 40
PHASES = {101: 0.0, 102: 2.0, 103: 4.0}
BACKENDS = [".h5"] + ([".bp"] if io.variants.get("adios2") else [])
LENGTH = {io.Unit_Dimension.L: 1}
MOMENTUM = {io.Unit_Dimension.L: 1, io.Unit_Dimension.M: 1, io.Unit_Dimension.T: -1}
SCALAR = io.Record_Component.SCALAR


def helix_motion():
    beta = math.sqrt(1.0 - 1.0 / GAMMA**2)
    beta_z = BETA_Z_FRACTION * beta
    beta_perp = math.sqrt(beta**2 - beta_z**2)
    omega = beta_perp * C / RADIUS_M
    return beta_z, beta_perp, omega


def step_s() -> float:
    return 2.0 * math.pi / helix_motion()[2] / 24.0  # 24 samples per turn


def helix_state(t_s, phase=0.0):
    """Closed-form position (n, 3) in m, β (n, 3) and β̇ (n, 3) in 1/s of the helix."""
    beta_z, beta_perp, omega = helix_motion()
    t_s = np.atleast_1d(np.asarray(t_s, dtype=float))
    angle = omega * t_s + phase
    cos, sin = np.cos(angle), np.sin(angle)
    position = np.column_stack([RADIUS_M * cos, RADIUS_M * sin, beta_z * C * t_s])
    beta = np.column_stack([-beta_perp * sin, beta_perp * cos, np.full_like(angle, beta_z)])
    beta_dot = -beta_perp * omega * np.column_stack([cos, sin, np.zeros_like(angle)])
    return position, beta, beta_dot


def helix(t_s, phase):
    """(position (n, 3), u (n, 3)) of the helix at times t_s."""
    position, beta, _ = helix_state(t_s, phase)
    return position, GAMMA * beta


def present(pid, k) -> bool:
    return pid != LATE_ID or LATE_SPAN[0] <= k <= LATE_SPAN[1]


def store(component, values, unit=1.0):
    data = np.ascontiguousarray(values)
    component.reset_dataset(io.Dataset(data.dtype, data.shape))
    component.store_chunk(data)
    component.unit_SI = unit


def constant(component, value, n, unit=1.0):
    component.reset_dataset(io.Dataset(np.dtype("float64"), [n]))
    component.make_constant(float(value))
    component.unit_SI = unit


def write_series(path, *, species=("electrons",), tweak=None, written=IDS):
    """A helix series at `path` of the given particle ids; tweak(k, particles) may change
    iteration k's records."""
    dt = step_s()
    series = io.Series(str(path), io.Access.create)
    for k in range(N_STEPS):
        iteration = series.iterations[k]
        iteration.time, iteration.time_unit_SI = k * dt / TIME_UNIT_S, TIME_UNIT_S
        ids = np.array([pid for pid in reversed(written) if present(pid, k)],
                       dtype=np.uint64)
        pos = np.array([helix([k * dt], PHASES[pid])[0][0] for pid in ids.tolist()])
        u = np.array([helix([k * dt - dt / 2], PHASES[pid])[1][0] for pid in ids.tolist()])
        for name in species:
            particles = iteration.particles[name]
            vectors = (("position", LENGTH, (pos - OFFSET_MM * 1e-3) / 1e-6, 1e-6),
                       ("momentum", MOMENTUM, u * M_E * C, 1.0))
            for record_name, dimension, values, unit in vectors:
                particles[record_name].unit_dimension = dimension
                for axis, column in zip("xyz", values.T, strict=True):
                    store(particles[record_name][axis], column, unit)
            particles["momentum"].time_offset = -0.5 * dt / TIME_UNIT_S
            particles["positionOffset"].unit_dimension = LENGTH
            for axis, value in zip("xyz", OFFSET_MM, strict=True):
                constant(particles["positionOffset"][axis], value, ids.size, unit=1e-3)
            particles["mass"].unit_dimension = {io.Unit_Dimension.M: 1}
            particles["charge"].unit_dimension = {io.Unit_Dimension.I: 1,
                                                  io.Unit_Dimension.T: 1}
            constant(particles["mass"][SCALAR], M_E, ids.size)
            constant(particles["charge"][SCALAR], -constants.e, ids.size)
            constant(particles["weighting"][SCALAR], 2.5, ids.size)
            store(particles["id"][SCALAR], ids)
            if tweak is not None:
                tweak(k, particles)
        series.flush()
        iteration.close()
    series.close()
    return path


@pytest.fixture(params=BACKENDS)
def series_path(request, tmp_path):
    return write_series(tmp_path / f"helix{request.param}")


# ------------------------------------------------------------------ import
def test_series_imports_the_analytic_helix(series_path):
    """Positions, momenta (γβ), times, weight, charge and the momentum offset equal the
    analytic helix to 1e-12 (relative to the size of each quantity)."""
    tracks = read_tracks(series_path)
    dt = step_s()
    assert tracks.importer.startswith("openpmd ")
    assert tracks.u_offset_s == pytest.approx(-0.5 * dt, rel=1e-12)
    assert [track.particle for track in tracks] == list(IDS)
    for track in tracks:
        steps = [k for k in range(N_STEPS) if present(track.particle, k)]
        t = np.array(steps) * dt
        position, _ = helix(t, PHASES[track.particle])
        _, u = helix(t - dt / 2, PHASES[track.particle])
        np.testing.assert_allclose(track.t_s, t, rtol=1e-12, atol=1e-12 * t[-1])
        scale = np.abs(position).max()
        np.testing.assert_allclose(track.position_m, position, rtol=1e-12,
                                   atol=1e-12 * scale)
        np.testing.assert_allclose(track.u, u, rtol=1e-12, atol=1e-12 * GAMMA)
        assert track.weight == 2.5 and track.charge_c == -constants.e


def test_momenta_from_charge_to_mass_when_the_mass_record_is_absent(tmp_path):
    """Without 'mass', m = charge / chargeToMass turns momentum into γβ: the same analytic
    helix momenta to 1e-12 (relative to γ)."""
    def charge_to_mass(k, particles):
        del particles["mass"]
        particles["chargeToMass"].unit_dimension = {io.Unit_Dimension.M: -1,
                                                    io.Unit_Dimension.I: 1,
                                                    io.Unit_Dimension.T: 1}
        n = particles["id"][SCALAR].shape[0]
        constant(particles["chargeToMass"][SCALAR], -constants.e / M_E, n)

    tracks = read_tracks(write_series(tmp_path / "q_over_m.h5", tweak=charge_to_mass))
    dt = step_s()
    for track in tracks:
        steps = [k for k in range(N_STEPS) if present(track.particle, k)]
        _, u = helix(np.array(steps) * dt - dt / 2, PHASES[track.particle])
        np.testing.assert_allclose(track.u, u, rtol=1e-12, atol=1e-12 * GAMMA)
        assert track.charge_c == -constants.e


def test_file_based_series_and_iteration_range(tmp_path):
    """A series of one file per iteration (data_%T.h5) reads the same; `iterations` keeps
    only the iterations asked for (both ends included)."""
    path = write_series(tmp_path / "data_%T.h5")
    assert len(list(tmp_path.glob("data_*.h5"))) == N_STEPS
    tracks = read_tracks(path, options={"plugins": {"openpmd": {"iterations": [10, 20]}}})
    dt = step_s()
    for track in tracks:
        np.testing.assert_allclose(track.t_s, np.arange(10, 21) * dt, rtol=1e-12)


def test_fields_equal_those_of_the_same_track_as_a_table(tmp_path):
    """The series and a CSV table of the same analytic samples, the CSV with
    [tracks] u_offset = −dt/2, give the same fields at a near observer (both terms)."""
    write_series(tmp_path / "helix.h5")
    dt = step_s()
    rows = []
    for pid in IDS:
        steps = [k for k in range(N_STEPS) if present(pid, k)]
        t = np.array(steps) * dt
        position, _ = helix(t, PHASES[pid])
        _, u = helix(t - dt / 2, PHASES[pid])
        rows.append(pd.DataFrame({"particle": pid, "t": t, "x": position[:, 0],
                                  "y": position[:, 1], "z": position[:, 2], "ux": u[:, 0],
                                  "uy": u[:, 1], "uz": u[:, 2], "weight": 2.5}))
    pd.concat(rows).to_csv(tmp_path / "helix.csv", index=False, float_format="%.17g")
    observers = [{"name": "near", "points": [[3e-3, 1e-3, 2e-3]]}]
    common = {"observers": observers, "time": {"step": dt / 8}, "motion": {"degree": 5}}
    from_series = lagfield.run({"tracks": {"path": "helix.h5", "format": "openpmd"},
                                **common}, base_dir=tmp_path, write=False)
    from_table = lagfield.run({"tracks": {"path": "helix.csv", "charge": -constants.e,
                                          "u_offset": -0.5 * dt}, **common},
                              base_dir=tmp_path, write=False)
    e_series = from_series.fields[["Ex", "Ey", "Ez"]].to_numpy()
    e_table = from_table.fields[["Ex", "Ey", "Ez"]].to_numpy()
    assert e_series.shape == e_table.shape and np.abs(e_table).max() > 0
    np.testing.assert_allclose(e_series, e_table, rtol=0, atol=1e-9 * np.abs(e_table).max())


def test_fields_equal_the_exact_lienard_wiechert_field_of_the_helix(tmp_path):
    """One electron of the series (weight 2.5), near field (both terms), at two points 3 cm
    (300 radii) from where it is at turn 1: along its velocity there (the pulse, ~6 as
    wide, resolved by 1 as bins: the series' arrival-time slip at its end, 0.56 as, allows
    no finer step) and 1.5/γ off it (a weaker, wider pulse). The bins
    against the exact Liénard–Wiechert field of the closed-form helix (Jackson, Classical
    Electrodynamics, 3rd ed., eq. 14.14; retarded time by brentq on t = t′ + |x − r(t′)|/c,
    bin averages by quadrature over each bin: tests/analytic_fields.py), to 1 % of each
    point's peak (3e-7 measured)."""
    write_series(tmp_path / "one.h5", written=(101,))
    t_turn = 24 * step_s()
    position, beta, _ = helix_state(t_turn, PHASES[101])
    along_velocity = beta[0] / np.linalg.norm(beta[0])
    tilt_axis = np.cross(along_velocity, [0.0, 0.0, 1.0])
    tilt_axis /= np.linalg.norm(tilt_axis)
    angle = 1.5 / GAMMA
    tilted = (along_velocity * math.cos(angle)
              + np.cross(tilt_axis, along_velocity) * math.sin(angle))
    distance_m, step = 0.03, 1e-18
    points = position[0] + distance_m * np.array([along_velocity, tilted])
    arrival = t_turn + distance_m / C
    run = {"tracks": {"path": "one.h5", "format": "openpmd"},
           "observers": [{"name": "near", "points": points.tolist()}],
           "time": {"step": step, "start": arrival - 150e-18, "stop": arrival + 150e-18},
           "motion": {"degree": 5}}
    fields = lagfield.run(run, base_dir=tmp_path, write=False).fields
    for point, observer in enumerate(points):
        rows = fields[fields["point"] == point]
        e = rows[["Ex", "Ey", "Ez"]].to_numpy()
        expected = exact_bin_averages(lambda t: helix_state(t, PHASES[101]), observer,
                                      rows["t"].to_numpy(), step, -2.5 * constants.e,
                                      reach_s=2.0 * distance_m / C)
        magnitude = np.linalg.norm(expected, axis=1)
        peak = magnitude.max()
        assert np.count_nonzero(magnitude > 0.5 * peak) >= 5  # the pulse is resolved
        assert max(magnitude[0], magnitude[-1]) < 0.1 * peak  # and inside the window
        np.testing.assert_allclose(e, expected, rtol=0, atol=0.01 * peak,
                                   err_msg=f"point {point}")


def test_can_read_is_cheap_and_recognises_series(tmp_path):
    from lagfield.plugins.openpmd_format import OpenPmdImporter

    importer = OpenPmdImporter()
    path = write_series(tmp_path / "a.h5")
    text = tmp_path / "b.h5"
    text.write_text("not hdf5")
    assert importer.can_read(path) and not importer.can_read(text)
    with pytest.raises(lagfield.TrackError, match="no file of the openPMD series"):
        importer.can_read(tmp_path / "nothing_%T.h5")


def test_inspect_reports_the_series(tmp_path):
    from lagfield.diagnose import inspect_tracks

    report = inspect_tracks(write_series(tmp_path / "helix.h5"), format="openpmd")
    assert report["n_particles"] == 3
    assert report["source"]["species"] == "electrons (of electrons)"
    assert report["source"]["iterations"] == f"0 to {N_STEPS - 1} ({N_STEPS} read)"
    assert report["time_span_s"]["stop"] == pytest.approx((N_STEPS - 1) * step_s(), rel=1e-12)


# ------------------------------------------------------------------ errors
def error_of(path, **openpmd_options) -> str:
    with pytest.raises(lagfield.TrackError) as caught:
        read_tracks(path, options={"plugins": {"openpmd": openpmd_options}})
    return str(caught.value)


def test_several_species_need_a_name(tmp_path):
    path = write_series(tmp_path / "two.h5", species=("electrons", "ions"))
    message = error_of(path)
    assert "2 particle species (electrons, ions)" in message and "species" in message
    assert len(read_tracks(path, options={"plugins": {"openpmd": {"species": "ions"}}})) == 3


def test_unknown_species_lists_those_present(tmp_path):
    message = error_of(write_series(tmp_path / "one.h5"), species="positrons")
    assert "'positrons'" in message and "electrons" in message


def test_missing_record_names_it_and_the_iteration(tmp_path):
    def drop_mass(k, particles):
        if k == 7:
            del particles["mass"]

    message = error_of(write_series(tmp_path / "mass.h5", tweak=drop_mass))
    assert "'mass'" in message and "iteration 7" in message and "'electrons'" in message


def test_no_id_record(tmp_path):
    def drop_id(k, particles):
        del particles["id"]

    message = error_of(write_series(tmp_path / "noid.h5", tweak=drop_id))
    assert "'id'" in message and "iteration 0" in message


def test_repeated_ids_within_an_iteration(tmp_path):
    def repeat(k, particles):
        if k == 10:  # three particles here
            ids = np.full(3, 101, dtype=np.uint64)
            particles["id"][SCALAR].store_chunk(ids)

    message = error_of(write_series(tmp_path / "twice.h5", tweak=repeat))
    assert "101" in message and "iteration 10" in message and "unique" in message


@pytest.mark.parametrize("record", ["position", "momentum"])
def test_unit_dimension_must_fit_the_record(tmp_path, record):
    def as_time(k, particles):
        particles[record].unit_dimension = {io.Unit_Dimension.T: 1}

    message = error_of(write_series(tmp_path / "units.h5", tweak=as_time))
    meaning = "a length" if record == "position" else "a momentum"
    assert f"'{record}'" in message and meaning in message and "unitDimension" in message


def test_cli_error_is_one_line_and_writes_nothing(tmp_path):
    """Several species without a name through `lagfield run`: non-zero exit, one message,
    no traceback, no output directory."""
    import subprocess
    import sys

    write_series(tmp_path / "two.h5", species=("electrons", "ions"))
    (tmp_path / "run.toml").write_text(
        '[tracks]\npath = "two.h5"\n\n[[observers]]\nname = "p"\npoints = [[0, 0.01, 0]]\n'
        '\n[time]\nstep = 1e-13\n\n[output]\ndir = "out"\n', encoding="utf-8")
    result = subprocess.run([sys.executable, "-m", "lagfield", "run", "run.toml"],
                            cwd=tmp_path, capture_output=True, text=True, timeout=300)
    assert result.returncode != 0
    assert "Traceback" not in result.stderr and "electrons, ions" in result.stderr
    assert not (tmp_path / "out").exists()


def test_one_batch_per_iteration_reassembled_through_buckets(tmp_path):
    """Each iteration is one batch (rows numbered on across them); with buckets far
    smaller than the series, the re-partitioned tracks equal the tracks read whole."""
    from lagfield.plugins.openpmd_format import OpenPmdImporter
    from lagfield.tracks import iter_tracks

    path = write_series(tmp_path / "helix.h5")
    frames = list(OpenPmdImporter().iter_batches(path, {}))
    assert len(frames) == N_STEPS
    sizes = [len(frame) for frame in frames]
    assert [frame.attrs["first_row"] for frame in frames] == list(np.cumsum([1] + sizes[:-1]))
    whole = {track.particle: track for track in read_tracks(path)}
    streamed = list(iter_tracks(path, bucket_rows=20))
    assert sorted(track.particle for track in streamed) == sorted(whole)
    for track in streamed:
        np.testing.assert_array_equal(track.position_m, whole[track.particle].position_m)
        np.testing.assert_array_equal(track.u, whole[track.particle].u)
