"""The built-in plot exporter: PNGs written through tmp_path from a synthetic result, and
the helpers that turn the tables into the plotted grids checked against formulas."""

from __future__ import annotations

import math
import struct
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from scipy import constants, special

from lagfield.errors import ConfigError
from lagfield.outputs import SAFETY_NOTE
from lagfield.plugins import plots
from lagfield.signals import Signals

EPS0_C = constants.epsilon_0 * constants.c  # CODATA values via scipy.constants
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), sec. 5.2

STEP_S = 1e-12
TAU_S = 4e-12  # pulse E(t) = A exp(-(t - t0)²/τ²)
POLARISATION = np.array([1.0, 0.5, -0.25])  # E = A g(t) · POLARISATION
POL2 = float(POLARISATION @ POLARISATION)

PLANE_CENTER_M = np.array([0.01, 0.0, 2.0])
PLANE_U = np.array([math.cos(0.5), math.sin(0.5), 0.0])
PLANE_V = np.array([0.0, 0.6, 0.8])
PLANE_SIZE_M = (0.004, 0.003)
PLANE_SHAPE = (5, 4)

SPHERE_CENTER_M = np.array([0.0, 0.0, 1.0])
SPHERE_RADIUS_M = 50.0
THETA_RAD = np.linspace(0.0, 0.04, 3)
PHI_RAD = np.linspace(0.0, 1.5 * math.pi, 4)


def plane_points():
    """SPEC numbering: point = i_u·n_v + i_v, edges included."""
    n_u, n_v = PLANE_SHAPE
    a = np.linspace(-0.5, 0.5, n_u) * PLANE_SIZE_M[0]
    b = np.linspace(-0.5, 0.5, n_v) * PLANE_SIZE_M[1]
    coords = [(a[i], b[j]) for i in range(n_u) for j in range(n_v)]
    xyz = np.array([PLANE_CENTER_M + ai * PLANE_U + bj * PLANE_V for ai, bj in coords])
    return a, b, np.array(coords), xyz


def sphere_points():
    """SPEC numbering: theta-major, point = i_theta·n_phi + i_phi, the pole repeated."""
    theta, phi = (g.ravel() for g in np.meshgrid(THETA_RAD, PHI_RAD, indexing="ij"))
    directions = np.stack([np.sin(theta) * np.cos(phi), np.sin(theta) * np.sin(phi),
                           np.cos(theta)], axis=1)
    return theta, phi, SPHERE_CENTER_M + SPHERE_RADIUS_M * directions


def amplitude_plane(u_m, v_m):
    return 2.0 * (1.0 + 100.0 * u_m + 300.0 * v_m)  # V/m, positive over the plane


def amplitude_sphere(theta, phi):
    return 3.0 * (1.0 + 10.0 * theta * (1.0 + np.cos(phi)))


def pulse_rows(name, amplitudes, arrivals_s):
    """Field rows of Gaussian pulses sampled at t_k = k·step, ±8τ about each arrival."""
    rows = []
    for point, (amp, t0) in enumerate(zip(amplitudes, arrivals_s, strict=True)):
        k = np.arange(math.floor((t0 - 8 * TAU_S) / STEP_S), math.ceil((t0 + 8 * TAU_S) / STEP_S))
        t = k * STEP_S
        g = amp * np.exp(-((t - t0) / TAU_S) ** 2)
        e = g[:, None] * POLARISATION
        rows.append(pd.DataFrame({"observer": name, "point": point, "t": t, "Ex": e[:, 0],
                                  "Ey": e[:, 1], "Ez": e[:, 2], "Bx": 0.0,
                                  "By": e[:, 0] / constants.c, "Bz": 0.0}))
    return pd.concat(rows, ignore_index=True)


def spectrum_rows(name, amplitudes, f_hz, radius_m=None):
    """F(f) = 2 ε0 c |Ẽ|² of the pulses: Ẽ = A τ √π exp(−(π f τ)²) · POLARISATION
    (Fourier transform of a Gaussian, as in tables of integrals, e.g. Abramowitz & Stegun,
    Handbook of Mathematical Functions, ch. 7, from memory; SPEC's sign convention; the
    phase drops out of F)."""
    rows = []
    for point, amp in enumerate(amplitudes):
        spectrum = amp * TAU_S * math.sqrt(math.pi) * np.exp(-(math.pi * f_hz * TAU_S) ** 2)
        frame = pd.DataFrame({"observer": name, "point": point, "f": f_hz,
                              "fluence": 2 * EPS0_C * POL2 * spectrum**2})
        if radius_m is not None:
            frame["dW_df_dOmega"] = radius_m**2 * frame["fluence"]
        rows.append(frame)
    return pd.concat(rows, ignore_index=True)


@pytest.fixture
def signals():
    """A points group, a 5×4 tilted plane and a 3×4 sphere, with pulses and spectra."""
    a, b, coords, plane_xyz = plane_points()
    theta, phi, sphere_xyz = sphere_points()
    pickup_xyz = np.array([[0.0, 0.02, 0.0], [0.0, -0.02, 0.1]])
    observers = pd.concat([
        pd.DataFrame({"observer": "pickup", "point": [0, 1], "x": pickup_xyz[:, 0],
                      "y": pickup_xyz[:, 1], "z": pickup_xyz[:, 2]}),
        pd.DataFrame({"observer": "screen", "point": np.arange(len(plane_xyz)),
                      "x": plane_xyz[:, 0], "y": plane_xyz[:, 1], "z": plane_xyz[:, 2]}),
        pd.DataFrame({"observer": "sky", "point": np.arange(len(sphere_xyz)),
                      "x": sphere_xyz[:, 0], "y": sphere_xyz[:, 1], "z": sphere_xyz[:, 2],
                      "theta": theta, "phi": phi}),
    ], ignore_index=True)
    plane_amp = amplitude_plane(coords[:, 0], coords[:, 1])
    sphere_amp = amplitude_sphere(theta, phi)
    fields = pd.concat([
        pulse_rows("pickup", [1.0, 0.5], [0.3e-9, 0.31e-9]),
        pulse_rows("screen", plane_amp, 33e-9 + 1e-12 * np.arange(len(plane_amp))),
        pulse_rows("sky", sphere_amp, 167e-9 + 3e-13 * np.arange(len(sphere_amp))),
    ], ignore_index=True)
    f_hz = np.geomspace(1e9, 3e11, 40)
    spectra = pd.concat([
        spectrum_rows("pickup", [1.0, 0.5], f_hz),
        spectrum_rows("screen", plane_amp, f_hz),
        spectrum_rows("sky", sphere_amp, f_hz, radius_m=SPHERE_RADIUS_M),
    ], ignore_index=True)
    return Signals(observers, fields, spectra, {"warnings": []})


def png_size(path):
    """(width, height) in pixels from the IHDR chunk (PNG specification, sec. 11.2.2)."""
    data = path.read_bytes()
    assert data[:8] == PNG_MAGIC and data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


def group(frame, name):
    return frame[frame["observer"] == name]


def test_exporter_writes_every_figure_as_png(tmp_path, signals):
    names = plots.PlotExporter().write(signals, tmp_path, {"dpi": 60})
    expected = ["pickup_waveforms.png", "pickup_spectrum.png",
                "screen_waveforms.png", "screen_fluence_map.png", "screen_spectrum.png",
                "screen_band_map.png",
                "sky_waveforms.png", "sky_fluence_map.png", "sky_spectrum.png", "sky_band_map.png"]
    assert names == expected
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(expected)
    for name in names:
        width, height = png_size(tmp_path / name)
        assert 200 <= width <= 2000 and 200 <= height <= 2000
        assert (tmp_path / name).stat().st_size > 5000  # axes, labels and curves drawn


def test_every_figure_carries_the_safety_note(tmp_path, signals, monkeypatch):
    """Figures can reach people who decide on exposure or shielding: each one shows the
    run's note that lagfield gives field estimates only (below the plots)."""
    footers = {}
    save = plots._save

    def recording(figure, directory, file_name, dpi):
        label = figure._supxlabel
        footers[file_name] = " ".join(label.get_text().split()) if label is not None else ""
        return save(figure, directory, file_name, dpi)

    monkeypatch.setattr(plots, "_save", recording)
    monkeypatch.setattr(signals, "summary", {"note": SAFETY_NOTE})
    names = plots.PlotExporter().write(signals, tmp_path, {"dpi": 40})
    assert sorted(footers) == sorted(names) and len(names) == 10
    assert all(text == SAFETY_NOTE for text in footers.values()), footers


def test_dpi_option_scales_the_image(tmp_path, signals):
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    small = plots.PlotExporter().write(signals, tmp_path / "a", {"dpi": 50})
    plots.PlotExporter().write(signals, tmp_path / "b", {"dpi": 100})
    for name in small:
        w_small, h_small = png_size(tmp_path / "a" / name)
        w_big, h_big = png_size(tmp_path / "b" / name)
        assert abs(w_big - 2 * w_small) <= 1 and abs(h_big - 2 * h_small) <= 1


def test_plane_fluence_grid_matches_the_pulse_energy(signals):
    """ε0 c ∫|E|² dt of E = A g(t)·p: A² |p|² τ √(π/2) (Gaussian integral
    ∫ exp(−2x²/τ²) dx = τ √(π/2), Abramowitz & Stegun ch. 7, from memory). With τ = 4
    steps the sum over samples equals the integral up to the rectangle-rule error
    ~ exp(−π²τ²/(2 step²)) ≈ e^-79; what is left is the rounding of t − t0 at t ≈ 33 ns
    (a few 1e-12 relative), hence rtol 1e-10 there."""
    observers, fields = group(signals.observers, "screen"), group(signals.fields, "screen")
    u_mm, v_mm, fluence = plots.fluence_grid(observers, fields)
    a, b, _, _ = plane_points()
    np.testing.assert_allclose(u_mm, a * 1e3, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(v_mm, b * 1e3, rtol=1e-12, atol=1e-12)
    assert fluence.shape == PLANE_SHAPE
    # independent sum ε0 c Σ|E|² Δt, point by point in SPEC numbering
    n_v = PLANE_SHAPE[1]
    for point, rows in fields.groupby("point"):
        e2 = (rows[["Ex", "Ey", "Ez"]].to_numpy() ** 2).sum()
        assert fluence[point // n_v, point % n_v] == pytest.approx(
            EPS0_C * e2 * STEP_S, rel=1e-12)
    ua, va = np.meshgrid(a, b, indexing="ij")
    analytic = EPS0_C * POL2 * amplitude_plane(ua, va) ** 2 * TAU_S * math.sqrt(math.pi / 2)
    np.testing.assert_allclose(fluence, analytic, rtol=1e-10)


def test_grid_layout_recovers_plane_axes_and_sphere_radius(signals):
    plane = plots.grid_layout(group(signals.observers, "screen"))
    assert plane.kind == "plane" and plane.points.shape == PLANE_SHAPE
    np.testing.assert_allclose(plane.u_hat, PLANE_U, atol=1e-12)
    np.testing.assert_allclose(plane.v_hat, PLANE_V, atol=1e-12)
    np.testing.assert_allclose(plane.center_m, PLANE_CENTER_M, atol=1e-12)
    sphere = plots.grid_layout(group(signals.observers, "sky"))
    assert sphere.kind == "sphere" and sphere.points.shape == (3, 4)
    assert sphere.radius_m == pytest.approx(SPHERE_RADIUS_M, rel=1e-12)
    np.testing.assert_allclose(sphere.center_m, SPHERE_CENTER_M, atol=1e-9)
    np.testing.assert_allclose(sphere.a, THETA_RAD, atol=0)
    assert plots.grid_layout(group(signals.observers, "pickup")) is None


def test_sphere_fluence_grid_is_theta_major(signals):
    theta_rad, phi_rad, fluence = plots.fluence_grid(group(signals.observers, "sky"),
                                                     group(signals.fields, "sky"))
    tt, pp = np.meshgrid(THETA_RAD, PHI_RAD, indexing="ij")
    # Gaussian integral as in the plane test; rounding of t − t0 at t ≈ 167 ns: rtol 1e-10
    analytic = EPS0_C * POL2 * amplitude_sphere(tt, pp) ** 2 * TAU_S * math.sqrt(math.pi / 2)
    np.testing.assert_allclose(theta_rad, THETA_RAD, atol=0)
    np.testing.assert_allclose(phi_rad, PHI_RAD, atol=0)
    np.testing.assert_allclose(fluence, analytic, rtol=1e-10)


def test_band_fluence_integrates_the_spectrum():
    """SPEC: ∫₀^∞ F df = ε0 c ∫|E|² dt. For the Gaussian pulse F ∝ exp(−2π²τ²f²), so the
    band [0, f_c] holds the fraction erf(√2 π τ f_c) (Gaussian integral). The trapezoid rule
    on 4001 linear frequencies up to 6/(πτ) is accurate to ~1e-10 here (even integrand)."""
    f_hz = np.linspace(0.0, 6 / (math.pi * TAU_S), 4001)
    spectra = spectrum_rows("s", [2.0], f_hz)
    total = plots.band_fluence(spectra, (0.0, f_hz[-1]))[0]
    assert total == pytest.approx(EPS0_C * POL2 * 4.0 * TAU_S * math.sqrt(math.pi / 2),
                                  rel=1e-9)
    f_c = f_hz[1000]
    part = plots.band_fluence(spectra, (0.0, f_c))[0]
    assert part / total == pytest.approx(special.erf(math.sqrt(2) * math.pi * TAU_S * f_c),
                                         rel=1e-6)


def test_band_option_with_units_and_too_narrow_band(tmp_path, signals):
    names = plots.PlotExporter().write(signals, tmp_path, {"dpi": 40, "band": ["10 GHz",
                                                                                "0.1 THz"]})
    assert "screen_band_map.png" in names
    (tmp_path / "narrow").mkdir()
    with pytest.raises(ConfigError, match=r"band.*observer group 'pickup'.*at least 2"):
        plots.PlotExporter().write(signals, tmp_path / "narrow", {"band": [1.0e10, 1.01e10]})
    assert list((tmp_path / "narrow").iterdir()) == []  # checked before any figure


@pytest.mark.parametrize("options, message", [
    ({"dip": 100}, r"unknown key 'dip' \(did you mean 'dpi'\?\)"),
    ({"max_curves": 0}, r"max_curves"),
    ({"band": [2e12, 1e12]}, r"f_lo < f_hi"),
    ({"band": ["1 m", 1e12]}, r"band\[0\]"),
])
def test_bad_options_name_the_key(tmp_path, signals, options, message):
    with pytest.raises(ConfigError, match=message):
        plots.PlotExporter().write(signals, tmp_path, options)


def test_degenerate_groups_still_plot(tmp_path):
    """One point, one time sample, zero field; a plane sampled once with the step known
    only from the run file."""
    _, _, _, plane_xyz = plane_points()
    observers = pd.concat([
        pd.DataFrame({"observer": "probe", "point": [0], "x": [0.0], "y": [0.0], "z": [1.0]}),
        pd.DataFrame({"observer": "flat", "point": np.arange(20), "x": plane_xyz[:, 0],
                      "y": plane_xyz[:, 1], "z": plane_xyz[:, 2]})], ignore_index=True)
    fields = pd.DataFrame({"observer": ["probe"] + ["flat"] * 20,
                           "point": [0, *range(20)], "t": 1e-9, "Ex": [0.0] + [1.0] * 20,
                           "Ey": 0.0, "Ez": 0.0, "Bx": 0.0, "By": 0.0, "Bz": 0.0})
    result = Signals(observers, fields, None, {})
    names = plots.PlotExporter().write(result, tmp_path, {"dpi": 40})
    assert names == ["probe_waveforms.png", "flat_waveforms.png"]  # step unknown: no map
    result.summary = {"run": {"time": {"step": "2 ps"}}}
    (tmp_path / "known").mkdir()
    names = plots.PlotExporter().write(result, tmp_path / "known", {"dpi": 40})
    assert "flat_fluence_map.png" in names
    assert plots.point_fluence(group(fields, "flat"), 2e-12).to_numpy() == pytest.approx(
        EPS0_C * 2e-12)
    for name in names:
        png_size(tmp_path / "known" / name)


def test_representative_points_are_spread_and_capped():
    assert plots.representative_points(np.arange(20), 6) == [0, 4, 8, 11, 15, 19]
    assert plots.representative_points(np.array([3]), 6) == [3]


def test_time_axis_unit_follows_the_span():
    reference, unit, label = plots.time_scale(np.array([33.0e-9, 33.2e-9]))
    assert unit == 1e-12 and reference == pytest.approx(33e-9, rel=1e-12)
    assert label == "t − 33 ns (ps)"
    reference, unit, label = plots.time_scale(np.array([0.0, 5e-15, 40e-15]))
    assert (reference, unit, label) == (0.0, 1e-15, "time t (fs)")


def test_import_does_not_load_matplotlib():
    code = "import sys, lagfield.plugins.plots; assert 'matplotlib' not in sys.modules"
    subprocess.run([sys.executable, "-c", code], check=True)
    # nor pandas (which would bring pyarrow): `lagfield plugins` imports this module
    code = ("import sys, lagfield.plugins.plots; "
            "assert not {'pandas', 'pyarrow'} & set(sys.modules)")
    subprocess.run([sys.executable, "-c", code], check=True)


# ---------------------------------------------------------------------------------------
# Exact fluence, sphere maps and spectrum axes


def exact_fluence_table(signals, method="exact, from the source motion"):
    """The fluence table of the fixture's groups from the analytic pulse energy
    ε0 c |p|² A² τ √(π/2) (Gaussian integral, as in the grid tests above)."""
    _, _, coords, _ = plane_points()
    theta, phi, _ = sphere_points()
    frames = []
    for name, amp in (("screen", amplitude_plane(coords[:, 0], coords[:, 1])),
                      ("sky", amplitude_sphere(theta, phi))):
        energy = EPS0_C * POL2 * amp**2 * TAU_S * math.sqrt(math.pi / 2)
        frame = pd.DataFrame({"observer": name, "point": np.arange(len(amp)),
                              "fluence": energy, "method": method})
        if name == "sky":
            frame.insert(3, "dW_dOmega", SPHERE_RADIUS_M**2 * energy)
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def test_maps_use_the_run_fluence_table_and_name_the_method(signals):
    """With a fluence table the map shows its values and its method; without one the bin
    averages are used and the map says they are a lower bound."""
    table = exact_fluence_table(signals, method="a method")
    fields = group(signals.fields, "sky")
    values, per_sr, method = plots.fluence_by_point(group(table, "sky"), fields, STEP_S)
    assert method == "a method"
    np.testing.assert_array_equal(values.to_numpy(), group(table, "sky")["fluence"])
    np.testing.assert_array_equal(per_sr.to_numpy(), group(table, "sky")["dW_dOmega"])
    values, per_sr, method = plots.fluence_by_point(None, fields, STEP_S)
    assert per_sr is None and "lower bound" in method
    np.testing.assert_allclose(values, plots.point_fluence(fields, STEP_S), rtol=0)
    assert plots.fluence_by_point(None, fields.iloc[:0], STEP_S) is None


def test_band_share_of_the_exact_total_stays_below_one(signals):
    """The band map's share of the total: F ∝ exp(−2π²τ²f²) puts the fraction
    [erf(√2πτ f_hi) − erf(√2πτ f_lo)] of ε0c∫|E|²dt in [f_lo, f_hi] (Gaussian integral), here
    98.0 %; the trapezoid rule on the fixture's 40 log-spaced frequencies errs by 0.4 %, so
    rtol 1e-2, and never above 1."""
    table = exact_fluence_table(signals)
    spectra = group(signals.spectra, "screen")
    f = np.unique(spectra["f"])
    band = plots.band_fluence(spectra, (f[0], f[-1])).sort_index().to_numpy()
    low, high = plots.band_share(band, group(table, "screen")["fluence"].to_numpy())
    fraction = (special.erf(math.sqrt(2) * math.pi * TAU_S * f[-1])
                - special.erf(math.sqrt(2) * math.pi * TAU_S * f[0]))
    assert low == pytest.approx(fraction, rel=1e-2) and high == pytest.approx(fraction, rel=1e-2)
    assert high <= 1.0


def test_exporter_with_a_fluence_table_writes_the_same_figures(tmp_path, signals):
    result = Signals(signals.observers, signals.fields, signals.spectra, {"warnings": []},
                     fluence=exact_fluence_table(signals))
    names = plots.PlotExporter().write(result, tmp_path, {"dpi": 40})
    assert {"screen_fluence_map.png", "sky_fluence_map.png", "sky_band_map.png"} <= set(names)


def test_sphere_cells_are_sectors_around_each_direction(signals):
    """Each direction (θ, φ) is drawn at (θ cos φ, θ sin φ) inside a sector reaching half-way
    to its neighbours (θ clipped at 0), drawn with arcs of at most 3°, coloured with its
    own value."""
    layout = plots.grid_layout(group(signals.observers, "sky"))
    values = np.arange(layout.points.size, dtype=float).reshape(layout.points.shape)
    x, y, c = plots.sphere_mesh(layout, values)
    n_theta, n_phi = layout.points.shape
    pieces = c.shape[1] // n_phi
    assert c.shape == (n_theta, n_phi * pieces) and x.shape == (n_theta + 1, c.shape[1] + 1)
    radius = np.hypot(x, y)
    theta_edges = [0.0, 0.01, 0.03, 0.05]  # half-way between 0, 0.02, 0.04; pole at 0
    np.testing.assert_allclose(radius, np.repeat(np.array(theta_edges)[:, None],
                                                 x.shape[1], axis=1), atol=1e-15)
    azimuth = np.unwrap(np.arctan2(y[-1], x[-1]))
    step = PHI_RAD[1] - PHI_RAD[0]
    assert np.max(np.diff(azimuth)) <= math.radians(3.0) + 1e-12
    for j, phi in enumerate(PHI_RAD):
        cell = slice(j * pieces, (j + 1) * pieces)
        np.testing.assert_array_equal(c[:, cell], np.repeat(values[:, j:j + 1], pieces, 1))
        assert azimuth[j * pieces] == pytest.approx(phi - step / 2, abs=1e-12)
        assert azimuth[(j + 1) * pieces] == pytest.approx(phi + step / 2, abs=1e-12)


@pytest.mark.parametrize("frequencies, summary, expected", [
    (np.linspace(1e12, 5e12, 50), None, "linear"),
    (np.geomspace(1e9, 1e13, 50), None, "log"),
    (np.linspace(0.0, 5e12, 50), None, "linear"),
    (np.geomspace(1e9, 1e13, 50),
     {"run": {"spectrum": {"frequencies": {"spacing": "linear"}}}}, "linear"),
    (np.linspace(1e12, 5e12, 50), {"run": {"spectrum": {"frequencies": {"spacing": "log"}}}},
     "log"),
])
def test_frequency_axis_follows_the_run_spacing(frequencies, summary, expected):
    assert plots.frequency_spacing(frequencies, summary) == expected


def test_log_axis_floor_cuts_numerical_noise():
    """max(peak × 1e-12, 1st percentile of the positive values)."""
    deep = np.geomspace(1.0, 1e-20, 1001)  # noise reaching far below 1e-12 of the peak
    assert plots.log_floor(deep) == pytest.approx(1e-12)
    shallow = np.append(np.geomspace(1.0, 1e-6, 101), [0.0, -1.0])
    assert plots.log_floor(shallow) == pytest.approx(np.percentile(shallow[:101], 1.0))
    assert plots.log_floor(np.zeros(5)) is None


def test_spectrum_figure_axes(signals):
    """A linear frequency list gets a linear frequency axis, a log one a log axis; the log
    y axis starts at the noise floor of the curves shown."""
    observers, spectra = group(signals.observers, "pickup"), group(signals.spectra, "pickup")
    figure = plots.plot_spectra("pickup", observers, spectra, None, [0, 1], spacing="log")
    ax = figure.axes[0]
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    assert ax.get_ylim()[0] == pytest.approx(plots.log_floor(spectra["fluence"]), rel=1e-9)
    linear = spectrum_rows("pickup", [1.0, 0.5], np.linspace(1e9, 3e11, 40))
    figure = plots.plot_spectra("pickup", observers, linear, None, [0, 1], spacing="linear")
    assert figure.axes[0].get_xscale() == "linear"
