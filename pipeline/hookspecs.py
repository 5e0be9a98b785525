"""Hook specifications: the whole contract between lagfield and its plugins.

A plugin is a module (or object) with functions marked ``@lagfield.hookimpl`` whose names
are those below. It is found through the Python entry-point group ``lagfield.plugins``;
the built-in CSV, Parquet and plot plugins come in through the same door.

Arguments are passed by keyword. An implementation may accept fewer arguments than the
specification, so new arguments can be added to a hook without breaking old plugins.
"""

from __future__ import annotations

import pluggy

hookspec = pluggy.HookspecMarker("lagfield")
hookimpl = pluggy.HookimplMarker("lagfield")


@hookspec
def lagfield_register_importers():
    """Called once when the plugin manager is built, to learn the track importers.

    Return a list of importer objects (not firstresult: every plugin's lists are joined).
    An importer object has:

    - ``name`` (str): what ``[tracks] format`` selects, e.g. ``"csv"``.
    - ``description`` (str): one line for ``lagfield plugins``.
    - ``extensions`` (tuple of str): file suffixes it claims, e.g. ``(".csv",)``; used to
      pick the importer when ``format`` is not given.
    - ``requires`` (tuple of str, optional): import names of optional packages it needs.
    - ``can_read(path) -> bool``: a cheap check (suffix, magic bytes or the first line;
      never the whole file) that the file at ``path`` (``pathlib.Path``) is of this format.
    - ``read(path, options) -> pandas.DataFrame``: the table with its columns as they are
      in the file (raw names and units). ``options`` is the ``[tracks]`` table of the run
      file as a dict (``columns`` and ``units`` included, for information). Column mapping,
      unit conversion, sorting and validation are done by lagfield for every importer.
    - ``iter_batches(path, options) -> iterator of pandas.DataFrame`` (optional): the same
      table in pieces, for files larger than memory; rows keep the file's order. When
      ``options["particle_range"]`` is ``(low, high)`` it may leave out pieces that hold no
      particle id in that range (a distributed worker reads only its own particles); a
      piece then says where it starts with ``frame.attrs["first_row"]`` (data row from 1).
    """


@hookspec
def lagfield_register_exporters():
    """Called once when the plugin manager is built, to learn the result exporters.

    Return a list of exporter objects (not firstresult: every plugin's lists are joined).
    An exporter object has:

    - ``name`` (str): what ``[output] formats`` selects, e.g. ``"parquet"``.
    - ``description`` (str): one line for ``lagfield plugins``.
    - ``requires`` (tuple of str, optional): import names of optional packages it needs.
    - ``write(result, directory, options) -> list of str``: write files for ``result`` (a
      ``lagfield.Signals``: the ``observers``, ``fields`` and, when computed, ``spectra``
      pandas DataFrames in SPEC units, and ``summary``, a dict) into ``directory``
      (``pathlib.Path``, a fresh temporary directory that lagfield renames into place when
      every exporter has succeeded). ``options`` is the run file's ``[plugins.<name>]``
      table (a dict, empty when absent). Return the names of the files written.
    """
