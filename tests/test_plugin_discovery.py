"""Plugins found through entry points: an in-house format outside the package, broken
plugins reported by name, and the two registration hooks."""

from __future__ import annotations

import importlib
import json
import pathlib
import sys

import numpy as np
import pandas as pd
import pytest
from scipy import constants

from lagfield.errors import PluginError, TrackError
from lagfield.registry import build_registry
from lagfield.signals import Signals
from lagfield.tracks import read_tracks

ELECTRON_CHARGE_C = -constants.e  # CODATA 2018, exact: -1.602176634e-19 C
FAKE_PLUGINS = pathlib.Path(__file__).parent / "fake_plugins"

TRK_PLUGIN = '''\
"""The ".trk" format: a line "#trk 1", then one sample per line: particle t x y z
(whitespace-separated, SI units)."""

import lagfield


class TrkImporter:
    name = "trk"
    description = "text lines 'particle t x y z' after a '#trk 1' line"
    extensions = (".trk",)
    requires = ()

    def can_read(self, path):
        with open(path, "rb") as stream:
            return stream.read(4) == b"#trk"

    def read(self, path, options):
        import pandas as pd

        return pd.read_csv(path, sep=r"\\s+", skiprows=1, header=None,
                           names=["particle", "t", "x", "y", "z"])


@lagfield.hookimpl
def lagfield_register_importers():
    return [TrkImporter()]
'''


def install_distribution(site: pathlib.Path, name: str, entry_points: dict[str, str]):
    """A minimal installed distribution in `site`: METADATA and entry_points.txt."""
    info = site / f"{name.replace('-', '_')}-0.1.dist-info"
    info.mkdir()
    (info / "METADATA").write_text(f"Metadata-Version: 2.1\nName: {name}\nVersion: 0.1\n")
    lines = "".join(f"{key} = {value}\n" for key, value in entry_points.items())
    (info / "entry_points.txt").write_text(f"[lagfield.plugins]\n{lines}")


@pytest.fixture
def site(tmp_path, monkeypatch):
    """tmp_path/site on sys.path, entry-point autoload on; test modules forgotten after."""
    site = tmp_path / "site"
    site.mkdir()
    monkeypatch.syspath_prepend(str(site))
    monkeypatch.delenv("LAGFIELD_DISABLE_PLUGIN_AUTOLOAD", raising=False)
    before = set(sys.modules)
    yield site
    for name in set(sys.modules) - before:
        if name.startswith("lagfield_"):
            del sys.modules[name]
    importlib.invalidate_caches()


def write_trk(path, table):
    with open(path, "w") as stream:
        stream.write("#trk 1\n")
        for row in table.itertuples(index=False):
            stream.write(f"{row.particle} {row.t!r} {row.x!r} {row.y!r} {row.z!r}\n")


def test_in_house_format_plugin_is_found_and_reads_tracks(site, tmp_path, helix):
    (site / "lagfield_trk_format.py").write_text(TRK_PLUGIN)
    install_distribution(site, "lagfield-trk", {"trk": "lagfield_trk_format"})
    registry = build_registry()
    (info,) = registry.importers["trk"]
    assert info.distribution == "lagfield-trk 0.1"
    table = helix(n_particles=2).drop(columns=["ux", "uy", "uz"])
    path = tmp_path / "beam.trk"
    write_trk(path, table.iloc[::-1])
    for tracks in (read_tracks(path, format="trk", charge=ELECTRON_CHARGE_C,
                               registry=registry),
                   read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)):
        assert [tr.particle for tr in tracks] == [0, 1]
        for track in tracks:
            want = table[table.particle == track.particle]
            np.testing.assert_array_equal(track.t_s, want.t)
            np.testing.assert_array_equal(track.position_m, want[["x", "y", "z"]])
            assert track.u is None and track.charge_c == ELECTRON_CHARGE_C


def test_in_house_format_errors_name_the_data_row(site, tmp_path, helix):
    (site / "lagfield_trk_format.py").write_text(TRK_PLUGIN)
    install_distribution(site, "lagfield-trk", {"trk": "lagfield_trk_format"})
    table = helix(n_particles=1).drop(columns=["ux", "uy", "uz"])
    table.loc[9, "t"] = table.loc[8, "t"]
    path = tmp_path / "dup.trk"
    write_trk(path, table)
    with pytest.raises(TrackError, match=r"rows 9 and 10") as error:
        read_tracks(path, charge=ELECTRON_CHARGE_C, registry=build_registry())
    assert error.value.particle == 0


def test_broken_plugins_are_reported_and_the_rest_work(site, tmp_path, monkeypatch, helix):
    monkeypatch.syspath_prepend(str(FAKE_PLUGINS))
    install_distribution(site, "lagfield-broken", {
        "brokenimport": "lagfield_fake_broken_import",
        "brokenhook": "lagfield_fake_broken_hook",
        "half": "lagfield_fake_malformed"})
    registry = build_registry()
    broken = {b.name: b for b in registry.broken}
    assert broken["brokenimport"].distribution == "lagfield-broken 0.1"
    assert broken["brokenimport"].error.startswith("ImportError: this plugin needs")
    assert broken["brokenhook"].error == ("RuntimeError: the importer table could not be "
                                          "built")
    assert "lacks can_read, read" in broken["half"].error
    with pytest.raises(PluginError, match=r"importer 'brokenimport' \(lagfield-broken 0.1\) "
                                          r"failed to load: ImportError"):
        registry.importer("brokenimport")
    path = tmp_path / "tracks.csv"
    helix(n_particles=2).to_csv(path, index=False)
    with pytest.raises(PluginError, match="'brokenhook'.*RuntimeError"):
        read_tracks(path, format="brokenhook", charge=ELECTRON_CHARGE_C, registry=registry)
    # the built-ins come in through the same entry points and still work
    assert [tr.particle for tr in read_tracks(path, charge=ELECTRON_CHARGE_C,
                                              registry=registry)] == [0, 1]
    assert registry.exporters["parquet"][0].distribution.startswith("lagfield ")


def test_hook_lagfield_register_importers(registry):
    infos = registry.importers
    assert sorted(infos) == ["csv", "parquet"]
    for name, (info,) in infos.items():
        importer = info.plugin
        assert importer.name == name and importer.description
        assert all(ext.startswith(".") for ext in importer.extensions)
        assert callable(importer.can_read) and callable(importer.read)
        assert callable(importer.iter_batches)


def test_hook_lagfield_register_exporters(registry, tmp_path):
    sys.path.insert(0, str(FAKE_PLUGINS))
    try:
        summary_plugin = importlib.import_module("lagfield_fake_summary")
    finally:
        sys.path.remove(str(FAKE_PLUGINS))
    registry = build_registry(autoload=False, extra_plugins=[
        *((name, registry.manager.get_plugin(name)) for name in ("csv", "parquet")),
        ("summary", summary_plugin)])
    assert sorted(registry.exporters) == ["csv", "parquet", "summary-json"]
    fields = pd.DataFrame({"observer": "p", "point": [0, 0], "t": [0.0, 1e-13], "Ex": 1.0,
                           "Ey": 0.0, "Ez": 0.0, "Bx": 0.0, "By": 1.0 / constants.c,
                           "Bz": 0.0})
    observers = pd.DataFrame({"observer": ["p"], "point": [0], "x": [0.0], "y": [0.0],
                              "z": [1.0]})
    result = Signals(observers, fields, summary={"version": "0.1.0"})
    names = registry.exporter("summary-json").write(result, tmp_path, {"note": "x"})
    assert names == ["summary.json"]
    assert json.loads((tmp_path / "summary.json").read_text()) == {
        "version": "0.1.0", "field_rows": 2, "note": "x"}
