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

import lagfield
from lagfield.errors import PluginError, TrackError
from lagfield.registry import build_registry
from lagfield.signals import Signals
from lagfield.tracks import open_tracks, read_tracks

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
    assert broken["half"].error == ("TypeError: importer HalfImporter 'half' lacks the "
                                    "methods can_read, read")
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


# -- plugins contained: whatever a plugin does, one clear report naming it ----------------

def test_plugin_exiting_at_import_or_in_its_hook_is_broken(site, monkeypatch, tmp_path, helix):
    monkeypatch.syspath_prepend(str(FAKE_PLUGINS))
    install_distribution(site, "lagfield-exits", {
        "exitimport": "lagfield_fake_exit_import", "exithook": "lagfield_fake_exit_hook",
        "stringext": "lagfield_fake_bad_extensions"})
    registry = build_registry()
    broken = {b.name: b for b in registry.broken}
    assert broken["exitimport"].error == "SystemExit: this plugin refuses to load"
    assert broken["exithook"].error == "SystemExit: 4"
    assert "'extensions', a tuple of suffixes" in broken["stringext"].error
    assert all(b.distribution == "lagfield-exits 0.1" for b in broken.values())
    path = tmp_path / "tracks.csv"
    helix(n_particles=1).to_csv(path, index=False)
    assert len(read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)) == 1


def test_interrupt_during_plugin_import_still_interrupts(site, monkeypatch):
    monkeypatch.syspath_prepend(str(FAKE_PLUGINS))
    install_distribution(site, "lagfield-slow", {"slow": "lagfield_fake_interrupt_import"})
    with pytest.raises(KeyboardInterrupt):
        build_registry()


@pytest.fixture
def misbehaving(site, monkeypatch):
    """A registry with the built-ins and the importers of lagfield_fake_misbehaving,
    installed as the distribution lagfield-misbehaving 0.1."""
    monkeypatch.syspath_prepend(str(FAKE_PLUGINS))
    install_distribution(site, "lagfield-misbehaving", {
        "misbehaving": "lagfield_fake_misbehaving"})
    return build_registry()


@pytest.mark.parametrize(("format", "what"), [
    ("raising", r"failed while reading .*beam\.fake: ValueError: column 7 of the binary"),
    ("exiting", r"failed while reading .*beam\.fake: SystemExit: 2"),
    ("list", r"is faulty: read gave list, not a pandas DataFrame"),
    ("nobatches", r"is faulty: iter_batches returned NoneType, not an iterator"),
    ("failingbatches", r"failed while reading .*: OSError: the network share went away"),
    ("brokencheck", r"failed while checking whether it can read .*RuntimeError"),
])
def test_importer_failures_are_one_plugin_error(misbehaving, tmp_path, helix, format, what):
    path = tmp_path / "beam.fake"
    helix(n_particles=2).to_csv(path, index=False)
    with pytest.raises(PluginError, match=rf"importer '{format}' \(lagfield-misbehaving "
                                          rf"0\.1\) {what}"):
        read_tracks(path, format=format, charge=ELECTRON_CHARGE_C, registry=misbehaving)


def test_track_error_raised_by_an_importer_passes_unchanged(misbehaving, tmp_path, helix):
    path = tmp_path / "beam.fake"
    helix(n_particles=1).to_csv(path, index=False)
    with pytest.raises(TrackError) as error:
        read_tracks(path, format="deliberate", charge=ELECTRON_CHARGE_C,
                    registry=misbehaving)
    assert error.value.reason == "the record header says version 9; this reader knows 1-3"
    assert error.value.row == 1 and error.value.path == path


def test_built_in_importer_wins_a_shared_extension(misbehaving, tmp_path, helix):
    import lagfield

    path = tmp_path / "beam.csv"
    helix(n_particles=2).to_csv(path, index=False)
    tracks = read_tracks(path, charge=ELECTRON_CHARGE_C, registry=misbehaving)
    assert tracks.importer == f"csv (lagfield {lagfield.__version__})"
    named = open_tracks(path, format="csvtoo", charge=ELECTRON_CHARGE_C,
                        registry=misbehaving)
    assert named.importer == "csvtoo (lagfield-misbehaving 0.1)"
    assert [tr.particle for tr in named] == [tr.particle for tr in tracks] == [0, 1]


def test_extension_claimed_by_two_plugins_needs_a_format(misbehaving, tmp_path, helix):
    path = tmp_path / "beam.fake"
    helix(n_particles=1).to_csv(path, index=False)
    with pytest.raises(PluginError, match=r"claimed by importer 'raising' "
                                          r"\(lagfield-misbehaving 0\.1\) and .*format"):
        read_tracks(path, charge=ELECTRON_CHARGE_C, registry=misbehaving)


def test_importer_momentum_offset_is_recorded(misbehaving, tmp_path, helix):
    table = helix(n_particles=2)
    path = tmp_path / "beam.half-step"
    table.to_csv(path, index=False)
    options = {"charge": ELECTRON_CHARGE_C, "registry": misbehaving}
    for tracks in (read_tracks(path, **options), open_tracks(path, **options)):
        assert tracks.u_offset_s == -5e-13 and tracks.importer.startswith("offset ")
        assert [tr.particle for tr in tracks] == [0, 1]
    plain = tmp_path / "beam.csv"
    table.to_csv(plain, index=False)
    assert read_tracks(plain, **options).u_offset_s is None


def test_importer_whose_required_package_is_absent(tmp_path, helix):
    class NeedsImporter:
        name, description, extensions = "needs", "needs a package", (".needs",)
        requires = ("lagfield_package_that_is_not_installed",)

        def can_read(self, path):
            return True

        def read(self, path, options):
            raise AssertionError("never called")

    class Plugin:
        @lagfield.hookimpl
        def lagfield_register_importers(self):
            return [NeedsImporter()]

    registry = build_registry(autoload=False, extra_plugins=[("needs", Plugin())])
    path = tmp_path / "beam.needs"
    helix(n_particles=1).to_csv(path, index=False)
    with pytest.raises(PluginError, match=r"importer 'needs' \(registered in-process\) needs "
                                          r"the package 'lagfield_package_that_is_not_inst"):
        read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)
