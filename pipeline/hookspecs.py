"""Hook specifications: the whole contract between lagfield and its plugins.

A plugin is a module (or object) with functions marked ``@lagfield.hookimpl`` whose names
are those below. It is found through the Python entry-point group ``lagfield.plugins``;
the built-in CSV, Parquet and plot plugins come in through the same door.

Arguments are passed by keyword. An implementation may accept fewer arguments than the
specification, so new arguments can be added to a hook without breaking old plugins.

A plugin whose import or registration hook raises (``SystemExit`` included; not
``KeyboardInterrupt``), or that returns objects lacking what is listed below, is reported
by ``lagfield plugins`` and stops only a run that selects it.
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
      in the file (raw names and units; a name the file repeats stays repeated, so that
      lagfield can report it). ``options`` is the ``[tracks]`` table of the run file as a
      dict (``columns`` and ``units`` included, for information). Column mapping, unit
      conversion, sorting and validation are done by lagfield for every importer. Anything
      but a DataFrame is reported as a fault of the importer.
    - ``iter_batches(path, options) -> iterator of pandas.DataFrame`` (optional): the same
      table in pieces, for files larger than memory; rows keep the file's order. When
      ``options["particle_range"]`` is ``(low, high)`` it may leave out pieces that hold no
      particle id in that range (a distributed worker reads only its own particles); a
      piece then says where it starts with ``frame.attrs["first_row"]`` (data row from 1).
    - ``series`` (bool, optional): True when ``path`` may name a set of files (a pattern
      such as ``data_%T.h5``) or a directory rather than one regular file; lagfield then
      leaves checking that it exists to ``can_read`` and ``iter_batches``.
    - ``describe(path, options) -> dict`` (optional): a few facts read cheaply from the
      file's metadata (label -> text), shown by ``lagfield inspect``.

    Momenta sampled at other times than positions: a frame may carry
    ``frame.attrs["u_offset_s"]`` (float, seconds): ux, uy, uz of a row were sampled at
    t + u_offset_s (a staggered pusher writes them half a step off). Every piece that gives
    it must give the same value. lagfield records it as ``Tracks.u_offset_s`` (None when no
    frame gives it).

    Errors: raise ``lagfield.TrackError`` (with ``path``, ``column``, ``row`` where known)
    for a file that is not what it should be; it reaches the user unchanged. Any other
    exception from ``can_read``, ``read`` or ``iter_batches`` (``SystemExit`` included) is
    reported as a ``lagfield.PluginError`` naming the importer and its distribution.
    ``KeyboardInterrupt`` is never caught.

    When the run names no format, the importer claiming the file's suffix reads it; when a
    built-in importer (distribution ``lagfield``) and another claim the same suffix, the
    built-in does. When none claims it, the first importer whose ``can_read`` says yes does.
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
      (``pathlib.Path``, a staging directory whose files lagfield moves into place when
      every exporter has succeeded; sub-directories are allowed). ``options`` is the run
      file's ``[plugins.<name>]`` table (a dict, empty when absent). Return a list of the
      names written, relative to ``directory``. Each exporter gets its own copy of
      ``result``; it must not change files another exporter wrote, nor use the names
      ``run.json`` or ``.lagfield*``. Any exception becomes a PluginError naming it.
    """
