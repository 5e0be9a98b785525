"""`[[detectors]]` entries: parsing to SI, one clear error per mistake, and the voltages and
digitized tables built from engine results."""

from __future__ import annotations

import copy

import numpy as np
import pandas as pd
import pytest
from analytic_fields import along, gaussian_bin_average, group_fields
from scipy import signal

from lagfield.chain import Butterworth, Gain, ImpulseResponse
from lagfield.detectors import detector_tables, parse_detectors
from lagfield.errors import ConfigError, DetectorError
from lagfield.sensors import Electrode

GROUPS = {"pickup": 4, "screen": 9}
BUTTON = {
    "name": "button-top", "observer": "pickup",
    "sensor": {"electrode": {"area": "80 mm^2", "normal": [0, -2, 0]}},
    "load": {"resistance": "50 ohm", "capacitance": "4 pF"},
    "chain": [{"butterworth": {"band": ["30 MHz", "80 MHz"], "order": 4}}, {"gain": "20 dB"}],
    "digitizer": {"rate": "500 MHz", "bits": 12, "range": ["-1 V", "1 V"], "noise": "2 mV",
                  "seed": 1},
}


def parse(*entries, base_dir=".", step_s=1e-11):
    return parse_detectors(list(entries), base_dir=base_dir, where="run.toml", groups=GROUPS,
                           step_s=step_s)


def changed(**keys):
    entry = copy.deepcopy(BUTTON)
    for key, value in keys.items():
        if value is None:
            entry.pop(key)
        else:
            entry[key] = value
    return entry


def test_an_entry_becomes_si_values():
    (detector,) = parse(BUTTON)
    assert detector.name == "button-top" and detector.observer == "pickup"
    assert detector.points is None
    assert detector.sensor == Electrode(area_m2=pytest.approx(80e-6), normal=(0.0, -1.0, 0.0),
                                        resistance_ohm=50.0, capacitance_f=pytest.approx(4e-12))
    assert detector.chain == (Butterworth(order=4, low_hz=30e6, high_hz=80e6),
                              Gain(factor=pytest.approx(10.0)))
    adc = detector.digitizer
    assert (adc.rate_hz, adc.bits, adc.full_scale_v, adc.noise_v, adc.seed) == (
        500e6, 12, 1.0, pytest.approx(2e-3), 1)


def test_electrode_without_load_drives_50_ohm_and_capacitance_alone_means_no_resistor():
    (plain,) = parse(changed(load=None))
    assert (plain.sensor.resistance_ohm, plain.sensor.capacitance_f) == (50.0, 0.0)
    (capacitive,) = parse(changed(load={"capacitance": "2 pF"}))
    assert capacitive.sensor.resistance_ohm == np.inf


@pytest.mark.parametrize(("entry", "message"), [
    (changed(observer="pickpu"), r"detector 'button-top': observer group 'pickpu' does not "
                                 r"exist; did you mean 'pickup'\?"),
    (changed(points=[0, 4]), r"point 4 is out of range; observer group 'pickup' has points 0"),
    (changed(points=[1, 1]), r"point 1 is listed twice"),
    (changed(points=[-1]), r"points: expected a whole number"),
    (changed(sensor={"electrode": {"area": "1 mm^2", "normal": [0, 1, 0]},
                     "effective_length": [0, 1, 0]}),
     r"exactly one of effective_area, effective_length, electrode; it holds electrode and "
     r"effective_length"),
    (changed(sensor=None), r"needs 'sensor'"),
    (changed(sensor={"electrod": {}}), r"unknown key 'electrod' in sensor; did you mean "
                                       r"'electrode'\?"),
    (changed(sensor={"electrode": {"area": "80 mm", "normal": [0, 1, 0]}}), r"electrode area"),
    (changed(sensor={"electrode": {"area": "80 mm^2", "normal": [0, 0, 0]}}), r"zero vector"),
    (changed(sensor={"electrode": {"area": -1e-6, "normal": [0, 1, 0]}}), r"must be positive"),
    (changed(sensor={"effective_length": [0, float("nan"), 0]}), r"effective_length"),
    (changed(sensor={"effective_length": [0, 1, 0]}), r"load applies to an electrode sensor"),
    (changed(load={"resistence": "50 ohm"}), r"unknown key 'resistence' in load; did you mean"),
    (changed(load={}), r"load needs a resistance, a capacitance or both"),
    (changed(chain=[{"butterworth": {"band": ["30 MHz", "80 GHz"]}}]),
     r"chain element 1: butterworth edge 8e\+10 Hz is at or above the Nyquist frequency "
     r"5e\+10 Hz"),
    (changed(chain=[{"butterworth": {"band": ["80 MHz", "30 MHz"]}}]), r"is not below"),
    (changed(chain=[{"butterworth": {"lowpass": "1 GHz", "highpass": "1 MHz"}}]),
     r"exactly one of band"),
    (changed(chain=[{"gain": "20 dBm"}]), r"chain element 1 \(gain\)"),
    (changed(chain=[{"gain": 2}, {"amplifier": {}}]), r"chain element 2: unknown key "
                                                      r"'amplifier'"),
    (changed(chain=[{"touchstone": {"path": "nope.s2p"}}]), r"file nope.s2p does not exist"),
    (changed(digitizer={**BUTTON["digitizer"], "rate": "500 GHz"}),
     r"digitizer rate 5e\+11 Hz is above the field's sample rate"),
    (changed(digitizer={**BUTTON["digitizer"], "range": ["0 V", "1 V"]}),
     r"range: must be symmetric about 0"),
    (changed(digitizer={**BUTTON["digitizer"], "bits": 40}), r"bits: expected a whole number"),
    (changed(digitizer={**BUTTON["digitizer"], "noise": "-1 mV"}), r"cannot be negative"),
    (changed(digitizer={"rate": "1 GHz", "bits": 8}), r"digitizer needs 'range'"),
    (changed(sensr={}), r"unknown key 'sensr' in detectors; did you mean 'sensor'\?"),
])
def test_mistakes_get_one_clear_error(entry, message):
    with pytest.raises(DetectorError, match=message) as caught:
        parse(entry)
    assert str(caught.value).startswith("run.toml: detector 'button-top'")
    assert isinstance(caught.value, ConfigError)  # the CLI's exit code for run-file errors


def test_names_are_required_and_unique():
    with pytest.raises(DetectorError, match=r"\[\[detectors\]\] #2: needs a name"):
        parse(BUTTON, changed(name=None))
    with pytest.raises(DetectorError, match=r"'button-top': the name is used by another"):
        parse(BUTTON, BUTTON)


def write_csv(path, text):
    path.write_text(text, encoding="utf-8")
    return path.name


@pytest.mark.parametrize(("text", "message"), [
    ("t,g\n0,1\n1e-12,2\n", r"amp.csv has no column 'h'"),
    ("t,h\n-1e-12,1\n0,2\n1e-12,3\n", r"amp.csv column 't' row 1: negative time"),
    ("t,h\n0,1\n1e-12,2\n3e-12,3\n", r"amp.csv column 't' row 3: times must increase "
                                       r"uniformly"),
    ("t,h\n0,1\n1e-12,x\n", r"amp.csv column 'h' row 2: not a finite number"),
    ("t,h\n0,1\n", r"amp.csv needs at least 2 rows"),
])
def test_impulse_table_problems_name_file_column_and_row(tmp_path, text, message):
    name = write_csv(tmp_path / "amp.csv", text)
    entry = changed(chain=[{"impulse_response": {"path": name}}])
    with pytest.raises(DetectorError, match=r"chain element 1 \(impulse_response\): " + message):
        parse(entry, base_dir=tmp_path)


def test_impulse_table_is_read_relative_to_the_run_file(tmp_path):
    name = write_csv(tmp_path / "amp.csv", "t,h,comment\n0,1e9,a\n1e-12,5e8,b\n2e-12,0,c\n")
    (detector,) = parse(changed(chain=[{"impulse_response": {"path": name}}]), base_dir=tmp_path)
    (element,) = detector.chain
    assert isinstance(element, ImpulseResponse)
    np.testing.assert_array_equal(element.h_per_s, [1e9, 5e8, 0.0])
    assert detector.inputs == ((tmp_path / "amp.csv").resolve(),)


def test_touchstone_file_problems(tmp_path):
    (tmp_path / "one.s1p").write_text("# Hz S RI R 50\n1e9 0.5 0\n2e9 0.5 0\n", encoding="utf-8")
    (tmp_path / "bad.s2p").write_text("# Hz S RI R 50\n1e9 not numbers\n", encoding="utf-8")
    with pytest.raises(DetectorError, match=r"one.s1p is a 1-port file; .* needs a 2-port"):
        parse(changed(chain=[{"touchstone": {"path": "one.s1p"}}]), base_dir=tmp_path)
    with pytest.raises(DetectorError, match=r"cannot read bad.s2p as a Touchstone file"):
        parse(changed(chain=[{"touchstone": {"path": "bad.s2p"}}]), base_dir=tmp_path)


# ---------------------------------------------------------------------------- tables
STEP_S = 1e-10
TIMES_S = 20e-9 + STEP_S * np.arange(300)


def pickup_fields(points=4):
    """Bin averages of a Gaussian E_y pulse (1 kV/m, σ = 0.5 ns) at every point, later at
    higher point numbers."""
    e = np.stack([along(1e3 * gaussian_bin_average(TIMES_S, STEP_S, 0.5e-9, 35e-9 + 1e-9 * p), 1)
                  for p in range(points)])
    return group_fields(STEP_S, TIMES_S[0], e)


def antenna(**keys):
    entry = {"name": "dipole", "observer": "pickup", "sensor": {"effective_length":
                                                                [0, "10 cm", 0]}}
    entry.update(keys)
    return entry


def test_tables_follow_the_spec_layout():
    detectors = parse(antenna(points=[2, 0]), changed(
        chain=[{"gain": "6 dB"}], digitizer={**BUTTON["digitizer"], "rate": "1 GHz"}))
    voltages, digitized = detector_tables(detectors, {"pickup": pickup_fields()})
    assert list(voltages.columns) == ["detector", "point", "t", "V"]
    assert list(digitized.columns) == ["detector", "point", "t", "code", "V"]
    assert voltages["point"].dtype == np.int64 and digitized["code"].dtype == np.int64
    counts = voltages.groupby(["detector", "point"], sort=False).size()
    assert counts.index.tolist() == [("dipole", 2), ("dipole", 0), ("button-top", 0),
                                     ("button-top", 1), ("button-top", 2), ("button-top", 3)]
    assert set(counts) == {TIMES_S.size}
    dipole = voltages[(voltages.detector == "dipole") & (voltages.point == 2)]
    np.testing.assert_allclose(dipole["t"], TIMES_S)
    assert dipole["V"].max() == pytest.approx(100.0 * 0.99, rel=0.01)  # h·E = 0.1 m × 1 kV/m
    assert set(digitized["detector"]) == {"button-top"}
    np.testing.assert_allclose(np.diff(digitized[digitized.point == 0]["t"]), 1e-9, rtol=1e-9)


def test_chain_runs_in_order_on_the_sensor_voltage():
    chained = antenna(chain=[{"butterworth": {"lowpass": "1 GHz", "order": 2}}, {"gain": 3}])
    (detector,) = parse(chained)
    voltages, digitized = detector_tables([detector], {"pickup": pickup_fields(1)})
    assert digitized is None
    raw = 0.1 * 1e3 * gaussian_bin_average(TIMES_S, STEP_S, 0.5e-9, 35e-9)
    sos = signal.butter(2, 1e9, btype="lowpass", fs=1 / STEP_S, output="sos")
    np.testing.assert_allclose(voltages["V"], 3 * signal.sosfilt(sos, raw), rtol=1e-10,
                               atol=1e-12)


def test_points_with_their_own_windows():
    fields = pickup_fields(2)
    fields.n_bins[1] = 120  # align = "point": each point its own window
    fields.start_s[1] = 30e-9
    voltages, _ = detector_tables(parse(antenna()), {"pickup": fields})
    second = voltages[voltages.point == 1]
    assert len(second) == 120 and second["t"].iloc[0] == pytest.approx(30e-9)


def test_same_seed_same_digitized_table():
    detectors = parse(changed(digitizer={**BUTTON["digitizer"], "rate": "1 GHz",
                                         "noise": "20 mV", "seed": 5}))
    first = detector_tables(detectors, {"pickup": pickup_fields()})[1]
    second = detector_tables(detectors, {"pickup": pickup_fields()})[1]
    pd.testing.assert_frame_equal(first, second)
    assert first["code"].std() > 0


def test_table_time_errors_name_the_detector(tmp_path):
    unchecked = parse_detectors([antenna(observer="screen")], base_dir=".", where="run.toml")
    with pytest.raises(DetectorError, match=r"detector 'dipole': observer group 'screen' does "
                                            r"not exist"):
        detector_tables(unchecked, {"pickup": pickup_fields()})
    coarse = parse_detectors([antenna(chain=[{"butterworth": {"lowpass": "8 GHz"}}])],
                             base_dir=".", where="run.toml")
    with pytest.raises(DetectorError, match=r"detector 'dipole': chain element 1: .*Nyquist"):
        detector_tables(coarse, {"pickup": pickup_fields()})
    f = np.linspace(1e9, 5e9, 50)
    lines = "\n".join(f"{x:.9g} 0 0 1 0 1 0 0 0" for x in f)
    (tmp_path / "cable.s2p").write_text(f"# Hz S RI R 50\n{lines}\n", encoding="utf-8")
    narrow = parse(antenna(chain=[{"touchstone": {"path": "cable.s2p"}}]), base_dir=tmp_path)
    with pytest.raises(DetectorError, match=r"detector 'dipole', point 0: chain element 1: "
                                            r"touchstone file cable.s2p covers 1e\+09 Hz"):
        detector_tables(narrow, {"pickup": pickup_fields()})
