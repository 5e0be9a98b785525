"""`Signals`: the result of a run, as the tables SPEC names (pandas DataFrames, SI units)."""

from __future__ import annotations

import dataclasses
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pandas as pd


@dataclasses.dataclass
class Signals:
    """What a run computed.

    observers: observer (str), point (int), x, y, z (m); theta, phi (rad) for spheres.
    fields: observer, point, t (s), Ex, Ey, Ez (V/m), Bx, By, Bz (T).
    spectra: observer, point, f (Hz), E*_re/E*_im (V·s/m, coherent runs), fluence
        (J/(m²·Hz)), dW_df_dOmega (J/(Hz·sr), spheres); None when no [spectrum] was asked.
    fluence: observer, point, fluence ε0c∫|E|²dt over the window (J/m²), dW_dOmega (J/sr,
        spheres: R² × fluence), method (str: how it was obtained, see lagfield.fluence).
    summary: a dict of run facts (version, run file, checksums, warnings, timings).
    voltages: detector (str), point, t (s), V (V): each detector's analog voltage on the
        field's time grid; None when the run has no [[detectors]].
    digitized: detector, point, t (s), code (int, ADC counts), V (V, code × LSB); None when
        no detector has a digitizer.
    """

    observers: pd.DataFrame
    fields: pd.DataFrame
    spectra: pd.DataFrame | None = None
    summary: dict = dataclasses.field(default_factory=dict)
    fluence: pd.DataFrame | None = None
    voltages: pd.DataFrame | None = None
    digitized: pd.DataFrame | None = None

    def tables(self) -> dict[str, pd.DataFrame]:
        """The tables that exist, by their file stem ("observers", "fields", "spectra",
        "fluence", "voltages", "digitized")."""
        out = {"observers": self.observers, "fields": self.fields}
        optional = {"spectra": self.spectra, "fluence": self.fluence,
                    "voltages": self.voltages, "digitized": self.digitized}
        out.update({name: table for name, table in optional.items() if table is not None})
        return out

    def __getitem__(self, name: str) -> pd.DataFrame:
        return self.tables()[name]

    def write_tables(self, directory, suffix: str, write) -> list[str]:
        """Call write(table, path) for each table, as directory/<name><suffix>; returns
        the file names (for exporters that write one file per table)."""
        from pathlib import Path

        written = []
        for stem, table in self.tables().items():
            write(table, Path(directory) / f"{stem}{suffix}")
            written.append(f"{stem}{suffix}")
        return written
