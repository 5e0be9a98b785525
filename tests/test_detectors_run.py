"""Detectors in a whole run: [[detectors]] checked before any computation, voltages and
digitized tables on disk and from `lagfield.run`, the detector figure, run.json, and the
shipped pickup demo's voltages against the physics of a button pickup."""

from __future__ import annotations

import json
import re
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import constants

import lagfield
from lagfield.cli import main
from lagfield.outputs import sha256

SAMPLES = Path(__file__).resolve().parent.parent / "sample_data"
GAMMA = 3.0
STEP = '"2 ps"'
ANTENNA = """
[[detectors]]
name = "dipole"
observer = "near"
sensor = { effective_length = [0.1, 0, 0] }
"""


def write_run(tmp_path, detectors=ANTENNA, formats='["parquet", "csv"]'):
    """One electron (γ = 3) passing a point 5 cm off its path, and `detectors`."""
    beta = np.sqrt(1.0 - 1.0 / GAMMA**2)
    t = np.linspace(-1e-9, 1e-9, 201)
    pd.DataFrame({"particle": 0, "t": t, "x": 0.0, "y": 0.0, "z": beta * constants.c * t,
                  "ux": 0.0, "uy": 0.0, "uz": beta * GAMMA}).to_csv(tmp_path / "tracks.csv",
                                                                     index=False)
    (tmp_path / "run.toml").write_text(f"""
[tracks]
path = "tracks.csv"
charge = "-1 e"

[[observers]]
name = "near"
points = [[0.05, 0.0, 0.0], [0.0, 0.05, 0.0]]

[time]
step = {STEP}
start = "-0.3 ns"
stop = "0.3 ns"
{detectors}
[output]
dir = "out"
formats = {formats}
""", encoding="utf-8")
    return tmp_path / "run.toml"


def write_s2p(path, f_first_hz, f_last_hz, ports=2):
    """A lossless, delay-free line (S21 = S12 = 1), or a 1-port file of S11 = 0.5."""
    f = np.linspace(f_first_hz, f_last_hz, 50)
    row = "0 0 1 0 1 0 0 0" if ports == 2 else "0.5 0"
    path.write_text("# Hz S RI R 50\n" + "\n".join(f"{x:.9g} {row}" for x in f) + "\n",
                    encoding="utf-8")


BASE = {"observer": '"near"', "sensor": "{ effective_length = [0.1, 0, 0] }"}
BAD_ENTRIES = [  # (keys changed from BASE, None: removed; the message expected)
    ({"observer": '"far"'}, r"detector 'bad': observer group 'far' does not exist; "
                            r"groups: near"),
    ({"points": "[2]"}, r"detector 'bad': point 2 is out of range; observer group 'near' has "
                        r"points 0 … 1"),
    ({"chain": '[{ butterworth = { band = ["1 GHz", "250 GHz"] } }]'},
     r"detector 'bad': chain element 1: butterworth edge 2.5e\+11 Hz is at or above the "
     r"Nyquist frequency"),
    ({"digitizer": '{ rate = "600 GHz", bits = 12, range = ["-1 V", "1 V"] }'},
     r"detector 'bad': digitizer rate 6e\+11 Hz is above the field's sample rate"),
    ({"chain": '[{ touchstone = { path = "none.s2p" } }]'},
     r"detector 'bad': chain element 1 \(touchstone\): file none.s2p does not exist"),
    ({"chain": '[{ touchstone = { path = "one.s1p" } }]'},
     r"detector 'bad': chain element 1 \(touchstone\): one.s1p is a 1-port file"),
    ({"chain": '[{ impulse_response = { path = "uneven.csv" } }]'},
     r"detector 'bad': chain element 1 \(impulse_response\): uneven.csv column 't' row 3: "
     r"times must increase uniformly"),
    ({"chain": '[{ impulse_response = { path = "early.csv" } }]'},
     r"early.csv column 't' row 1: negative time"),
    ({"sensor": '{ electrode = { area = "1 cm2", normal = [1, 0, 0] }, '
                'effective_length = [1, 0, 0] }'},
     r"detector 'bad': sensor must hold exactly one of"),
    ({"sensor": None}, r"detector 'bad': a detector needs 'sensor'"),
    ({"load": '{ resistance = "50 ohm" }'}, r"load applies to an electrode sensor only"),
    ({"sensor": '{ electrode = { area = "1 cm2", nromal = [1, 0, 0] } }'},
     r"unknown key 'nromal' in electrode; did you mean 'normal'\?"),
]


@pytest.mark.parametrize(("change", "message"), BAD_ENTRIES)
def test_bad_detector_is_one_line_before_any_computation(tmp_path, capsys, change, message):
    write_s2p(tmp_path / "one.s1p", 1e9, 2e9, ports=1)
    (tmp_path / "uneven.csv").write_text("t,h\n0,1\n1e-12,1\n3e-12,1\n", encoding="utf-8")
    (tmp_path / "early.csv").write_text("t,h\n-1e-12,1\n0,1\n", encoding="utf-8")
    keys = {**BASE, **change}
    entry = "\n".join(["[[detectors]]", 'name = "bad"'] +
                      [f"{key} = {value}" for key, value in keys.items() if value is not None])
    run_file = write_run(tmp_path, entry + "\n")
    assert main(["run", str(run_file)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    (line,) = [x for x in err.splitlines() if "error" in x]
    assert str(run_file) in line
    assert re.search(message, line), line
    assert not (tmp_path / "out").exists()  # checked before the output is opened


def test_touchstone_short_of_the_band_stops_before_anything_is_written(tmp_path, capsys):
    write_s2p(tmp_path / "cable.s2p", 1e9, 5e9)
    run_file = write_run(tmp_path, ANTENNA + 'chain = [{ touchstone = { path = "cable.s2p" } }]\n')
    assert main(["run", str(run_file)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert "detector 'dipole', point 0: chain element 1: touchstone file cable.s2p covers" in err
    assert str(run_file) in err
    out = tmp_path / "out"  # the band is checked against the signal, before any export
    assert not out.exists() or not [p for p in out.iterdir() if not p.name.startswith(".")]


def test_voltages_and_digitized_tables_on_disk_and_returned(tmp_path):
    amp = tmp_path / "amp.csv"  # a unit-area box 10 ps long: keeps the pulse's area
    amp.write_text("t,h\n0,1e11\n5e-12,1e11\n1e-11,1e11\n", encoding="utf-8")
    detectors = ANTENNA + """
chain = [{ impulse_response = { path = "amp.csv" } }, { gain = "6 dB" }]
digitizer = { rate = "100 GHz", bits = 8, range = ["-2 V", "2 V"], seed = 5 }
"""
    signals = lagfield.run(write_run(tmp_path, detectors))
    out = tmp_path / "out"
    for name, columns in (("voltages", ["detector", "point", "t", "V"]),
                          ("digitized", ["detector", "point", "t", "code", "V"])):
        on_disk = pd.read_parquet(out / f"{name}.parquet")
        assert list(on_disk.columns) == columns
        pd.testing.assert_frame_equal(on_disk, signals[name])
        assert list(pd.read_csv(out / f"{name}.csv").columns) == columns
    voltages, fields = signals.voltages, signals.fields
    assert sorted(voltages["point"].unique()) == [0, 1]
    # V = h·E, then a unit-area response and 6 dB (× 1.995): the area ∫V dt is kept
    gain = 10 ** (6 / 20)
    for point in (0, 1):
        v = voltages[voltages.point == point]
        e = fields[fields.point == point]
        np.testing.assert_allclose(v["t"], e["t"])
        area_v = v["V"].sum() * 2e-12
        area_e = 0.1 * e["Ex"].sum() * 2e-12 * gain
        assert area_v == pytest.approx(area_e, rel=1e-3, abs=1e-6 * abs(area_e) + 1e-30)
    digitized = signals.digitized
    assert digitized["code"].dtype == np.int64
    lsb = 4.0 / 2**8
    np.testing.assert_allclose(digitized["V"], digitized["code"] * lsb)
    summary = json.loads((out / "run.json").read_text())
    assert summary["inputs"]["amp.csv"]["sha256"] == sha256(amp)
    record = summary["detectors"]["dipole"]
    assert record["sensor"] == {"kind": "effective_length", "length_m": [0.1, 0.0, 0.0]}
    assert record["chain"][0]["kind"] == "impulse_response"
    assert record["chain"][0]["path"] == "amp.csv"
    assert record["chain"][0]["area"] == pytest.approx(1.0)
    assert record["chain"][1] == {"kind": "gain", "factor": pytest.approx(gain)}
    assert record["digitizer"]["lsb_v"] == lsb
    assert record["digitizer"]["codes"] == [-128, 127]


def test_run_without_detectors_writes_no_detector_tables(tmp_path):
    signals = lagfield.run(write_run(tmp_path, ""))
    assert signals.voltages is None and signals.digitized is None
    assert not (tmp_path / "out" / "voltages.parquet").exists()
    assert json.loads((tmp_path / "out" / "run.json").read_text())["detectors"] == {}


def test_analog_detector_writes_no_digitized_table(tmp_path):
    signals = lagfield.run(write_run(tmp_path))
    assert signals.digitized is None and len(signals.voltages)
    assert (tmp_path / "out" / "voltages.parquet").exists()
    assert not (tmp_path / "out" / "digitized.parquet").exists()


def test_detector_figure_is_written(tmp_path):
    detectors = ANTENNA + 'digitizer = { rate = "50 GHz", bits = 10, range = ["-1 V", "1 V"] }\n'
    lagfield.run(write_run(tmp_path, detectors, formats='["plots"]'))
    figure = tmp_path / "out" / "detector_voltages.png"
    assert figure.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_distributed_run_gives_the_same_voltages(tmp_path):
    detectors = ANTENNA + 'digitizer = { rate = "100 GHz", bits = 12, range = ["-1 V", "1 V"] }\n'
    run_file = write_run(tmp_path, detectors)
    local = lagfield.run(run_file, write=False)
    spread = lagfield.run(run_file, write=False, workers=1)
    pd.testing.assert_frame_equal(spread.voltages, local.voltages, rtol=1e-12)
    pd.testing.assert_frame_equal(spread.digitized, local.digitized)


# ------------------------------------------------------------------------- the pickup demo
def demo_run(change=None) -> lagfield.Signals:
    raw = tomllib.loads((SAMPLES / "pickup" / "run.toml").read_text(encoding="utf-8"))
    for detector in raw["detectors"]:
        (change or (lambda d: None))(detector)
    return lagfield.run(raw, base_dir=SAMPLES / "pickup", write=False)


@pytest.fixture(scope="module")
def demo():
    return demo_run()


def test_demo_buttons_agree_and_show_the_electron_sign(demo):
    raw = tomllib.loads((SAMPLES / "pickup" / "run.toml").read_text(encoding="utf-8"))
    assert [d["name"] for d in raw["detectors"]] == sorted(demo.voltages["detector"].unique(),
                                                           key=["button-right", "button-top",
                                                                "button-left",
                                                                "button-bottom"].index)
    traces = {name: group["V"].to_numpy() for name, group in demo.voltages.groupby("detector")}
    peak = max(np.abs(v).max() for v in traces.values())
    # a centred bunch (centroid within ~0.1 mm of the axis, b = 20 mm): the four buttons
    # agree to a few parts per thousand of the peak
    for v in traces.values():
        np.testing.assert_allclose(v, traces["button-top"], atol=1e-2 * peak)
        # electrons induce a positive charge: the positive lobe comes first
        assert np.argmax(v) < np.argmin(v)
        assert v.max() > 0.2  # well above the 2 mV noise and inside the ±1 V range
        assert v.max() < 1.0
    # every sample's code is V/LSB rounded, to within the noise (2 mV rms, < 5 sigma)
    digitized = demo.digitized
    lsb = 2.0 / 2**12
    np.testing.assert_allclose(digitized["V"], digitized["code"] * lsb)
    for name, group in digitized.groupby("detector"):
        analog = demo.voltages[demo.voltages.detector == name]
        expected = np.interp(group["t"], analog["t"], analog["V"])
        assert np.abs(group["V"] - expected).max() < 5 * 2e-3 + lsb


def test_digitized_codes_are_rounded_and_clipped():
    """Without noise, code = round(V/LSB) clipped to the 12-bit range (SPEC, digitizer)."""
    def narrow(detector):
        detector["digitizer"].update(noise=0.0, range=["-0.2 V", "0.2 V"])
    signals = demo_run(narrow)
    lsb = 0.4 / 2**12
    for name, group in signals.digitized.groupby("detector"):
        analog = signals.voltages[signals.voltages.detector == name]
        volts = np.interp(group["t"], analog["t"], analog["V"])
        expected = np.clip(np.rint(volts / lsb), -2048, 2047)
        np.testing.assert_array_equal(group["code"], expected)
        assert group["code"].max() == 2047  # the 0.45 V lobe clips


def test_demo_button_charge_follows_the_line_charge_picture():
    """A button of area A at radius b from a bunch of charge q moving at v: the induced
    charge Q = ε0 A n̂·E has ∫Q dt = A|q|/(2π b v), the time integral of the line-charge
    picture Q = A λ/(2πb) (common practice for button pickups), exact for any γ because
    ∫E⊥ dt = q/(2π ε0 b v) for a charge passing at b (Jackson, Classical Electrodynamics,
    3rd ed., eq. 11.154 integrated over time). With a capacitance-only load V = ΔQ/C."""
    capacitance = 2e-12

    def bare(detector):
        detector.pop("chain"), detector.pop("digitizer")
        detector["load"] = {"capacitance": f"{capacitance} F"}
    signals = demo_run(bare)
    tracks = pd.read_parquet(SAMPLES / "pickup" / "tracks.parquet")
    raw = tomllib.loads((SAMPLES / "pickup" / "run.toml").read_text(encoding="utf-8"))
    first = tracks.groupby("particle").first()
    q = abs(raw["tracks"]["charge"]) * first["weight"].sum()
    assert q == pytest.approx(100e-12, rel=1e-3)  # the demo's 100 pC
    u = np.sqrt(first["ux"] ** 2 + first["uy"] ** 2 + first["uz"] ** 2).mean()
    v = constants.c * u / np.sqrt(1.0 + u**2)
    area, radius = 80e-6, 0.02
    expected = area * q / (2 * np.pi * radius * v)
    step = 2e-12
    for name, group in signals.voltages.groupby("detector"):
        integral = capacitance * group["V"].sum() * step
        assert integral == pytest.approx(expected, rel=0.02), name
