"""Plugin discovery: builds the name -> plugin tables from the entry-point group
``lagfield.plugins``, and keeps plugin failures contained.

A plugin that fails to load, whose registration hook raises, or that registers malformed
objects becomes a `BrokenPlugin` reported by name; it never stops the others from working.
"Fails" means any exception, `SystemExit` included (a plugin calling ``sys.exit`` must not
end the program). `KeyboardInterrupt` is not caught: Ctrl-C during a slow plugin import or
read still stops lagfield at once. The same rule holds when a selected plugin is called
(`contained`): its failure becomes one `PluginError` naming the plugin and its distribution.
"""

from __future__ import annotations

import contextlib
import dataclasses
import functools
import importlib.metadata
import os
import traceback

import pluggy

from . import hookspecs
from .errors import LagfieldError, PluginError

ENTRY_POINT_GROUP = "lagfield.plugins"
BUILTIN_DISTRIBUTION = "lagfield"
BUILTIN_PACKAGE = "lagfield.plugins"
IN_PROCESS = "(registered in-process)"
IMPORTER_CALLABLES = ("can_read", "read")
EXPORTER_CALLABLES = ("write",)
PLUGIN_FAILURES = (Exception, SystemExit)  # KeyboardInterrupt is left to stop the program


@dataclasses.dataclass(frozen=True)
class BrokenPlugin:
    """A plugin that could not be used, with the reason."""

    name: str
    distribution: str
    error: str


@dataclasses.dataclass(frozen=True)
class PluginInfo:
    """One registered importer or exporter, with where it came from."""

    kind: str  # "importer" or "exporter"
    name: str
    plugin: object
    distribution: str  # "name version" of the distribution that provides it

    @property
    def label(self) -> str:
        """'csv (lagfield 0.1.0)': the name and where it comes from, for messages and
        run.json."""
        return f"{self.name} ({self.distribution.strip('()')})"

    @property
    def quoted(self) -> str:
        """"importer 'csv' (lagfield 0.1.0)": what messages call it."""
        return f"{self.kind} '{self.name}' ({self.distribution.strip('()')})"

    @property
    def builtin(self) -> bool:
        """True for the plugins shipped with lagfield (installed or registered in-process)."""
        return (self.distribution.split(" ")[0] == BUILTIN_DISTRIBUTION
                or type(self.plugin).__module__.startswith(BUILTIN_PACKAGE + "."))


@contextlib.contextmanager
def contained(info: PluginInfo, action: str):
    """Turn any failure of plugin code run inside the block into one PluginError naming
    the plugin, its distribution and `action` ("reading tracks.csv"). LagfieldErrors (a
    TrackError a plugin raises on purpose) and KeyboardInterrupt pass unchanged."""
    try:
        yield
    except LagfieldError:
        raise
    except PLUGIN_FAILURES as exc:
        detail = f"{type(exc).__name__}: {exc}"
        if os.environ.get("LAGFIELD_TRACE_PLUGINS"):
            detail += "\n" + traceback.format_exc()
        raise PluginError(f"{info.quoted} failed while {action}: {detail}") from exc


def _malformed(kind: str, obj) -> str | None:
    """What is wrong with a registered importer or exporter object, or None."""
    problems = []
    name = getattr(obj, "name", None)
    if not isinstance(name, str) or not name:
        problems.append("a non-empty str 'name'")
    if not isinstance(getattr(obj, "description", None), str):
        problems.append("a str 'description'")
    if kind == "importer":
        extensions = getattr(obj, "extensions", None)
        if (not isinstance(extensions, tuple | list)
                or not all(isinstance(e, str) and e.startswith(".") for e in extensions)):
            problems.append("'extensions', a tuple of suffixes such as ('.trk',)")
    requires = getattr(obj, "requires", ())
    if not isinstance(requires, tuple | list) or not all(isinstance(r, str) for r in requires):
        problems.append("'requires', a tuple of import names (or none)")
    callables = IMPORTER_CALLABLES if kind == "importer" else EXPORTER_CALLABLES
    absent = [a for a in callables if not callable(getattr(obj, a, None))]
    if absent:
        problems.append(f"the method{'s' * (len(absent) > 1)} {', '.join(absent)}")
    if not problems:
        return None
    called = f" '{name}'" if isinstance(name, str) and name else ""
    return f"{kind} {type(obj).__name__}{called} lacks {'; '.join(problems)}"


class Registry:
    """The importers and exporters available, built from one plugin manager."""

    def __init__(self, manager: pluggy.PluginManager, sources: dict[str, str],
                 broken: list[BrokenPlugin]):
        self.manager = manager
        self.broken = list(broken)
        self.importers: dict[str, list[PluginInfo]] = {}
        self.exporters: dict[str, list[PluginInfo]] = {}
        self._collect("importer", manager.hook.lagfield_register_importers, sources,
                      self.importers)
        self._collect("exporter", manager.hook.lagfield_register_exporters, sources,
                      self.exporters)

    def _collect(self, kind, hook, sources, table):
        for impl in hook.get_hookimpls():
            plugin_name = self.manager.get_name(impl.plugin) or repr(impl.plugin)
            distribution = sources.get(plugin_name, IN_PROCESS)
            try:
                objects = list(impl.function() or ())
                for obj in objects:
                    problem = _malformed(kind, obj)
                    if problem:
                        raise TypeError(problem)
                for obj in objects:
                    table.setdefault(obj.name, []).append(
                        PluginInfo(kind, obj.name, obj, distribution))
            except PLUGIN_FAILURES as exc:  # a broken plugin must not break the others
                self.broken.append(BrokenPlugin(plugin_name, distribution,
                                                f"{type(exc).__name__}: {exc}"))

    def _broken_note(self) -> str:
        if not self.broken:
            return ""
        names = ", ".join(f"'{b.name}' ({b.distribution})" for b in self.broken)
        return f"; plugins that failed to load (see `lagfield plugins`): {names}"

    def _select(self, kind: str, table: dict[str, list[PluginInfo]], name: str) -> PluginInfo:
        for broken in self.broken:
            if broken.name == name:
                raise PluginError(f"{kind} '{name}' ({broken.distribution}) failed to load: "
                                  f"{broken.error}")
        infos = table.get(name)
        if not infos:
            known = ", ".join(sorted(table)) or "none"
            raise PluginError(f"no {kind} named '{name}' is installed (installed: {known})"
                              + self._broken_note())
        if len(infos) > 1:
            origins = " and ".join(i.distribution for i in infos)
            raise PluginError(f"{kind} name '{name}' is registered twice, by {origins}")
        return self._usable(infos[0])

    def _usable(self, info: PluginInfo) -> PluginInfo:
        """`info` once the optional packages it requires import."""
        for module in getattr(info.plugin, "requires", ()) or ():
            try:
                __import__(module)
            except PLUGIN_FAILURES as exc:  # a package that is absent or fails to import
                raise PluginError(f"{info.quoted} needs the package '{module}': "
                                  f"{type(exc).__name__}: {exc}") from None
        return info

    def importer_info(self, name: str) -> PluginInfo:
        """The importer called `name` with its origin; a clear PluginError if it is
        missing, broken, ambiguous or lacks a package it requires."""
        return self._select("importer", self.importers, name)

    def exporter_info(self, name: str) -> PluginInfo:
        """The exporter called `name` with its origin (errors as for `importer_info`)."""
        return self._select("exporter", self.exporters, name)

    def importer(self, name: str):
        """The importer object called `name` (see `importer_info`)."""
        return self.importer_info(name).plugin

    def exporter(self, name: str):
        """The exporter object called `name` (see `exporter_info`)."""
        return self.exporter_info(name).plugin

    def importers_claiming(self, path) -> list[PluginInfo]:
        """The importers whose extensions include the last suffix of `path` (any case).
        When a built-in is among them it alone is returned: built-ins win a shared suffix
        unless the run names a format."""
        suffix = "".join(path.suffixes[-1:]).lower()
        infos = [info for infos in self.importers.values() for info in infos
                 if suffix and suffix in (e.lower() for e in info.plugin.extensions)]
        builtin = [info for info in infos if info.builtin]
        return builtin or infos

    def importer_for(self, path) -> PluginInfo | None:
        """The importer for the file at `path` when no format is named: the one claiming
        its suffix; or, when none does, the first (built-ins first) whose `can_read` says
        yes; None when no importer recognises the file. Two non-built-in importers
        claiming the suffix are a PluginError naming both."""
        claiming = self.importers_claiming(path)
        if len(claiming) > 1:
            names = " and ".join(info.quoted for info in claiming)
            raise PluginError(f"files ending in '{path.suffix}' are claimed by {names}; set "
                              f"[tracks] format to choose one ({path})")
        if claiming:
            return self._usable(claiming[0])
        every = sorted((info for infos in self.importers.values() for info in infos),
                       key=lambda info: not info.builtin)
        for info in every:
            with contained(info, f"checking whether it can read {path}"):
                if info.plugin.can_read(path):
                    return self._usable(info)
        return None


def _distribution_label(entry_point) -> str:
    dist = getattr(entry_point, "dist", None)
    if dist is None:
        return "(unknown distribution)"
    return f"{dist.metadata['Name']} {dist.version}"


def build_registry(*, autoload: bool | None = None, extra_plugins=()) -> Registry:
    """A fresh registry. `autoload` False skips the entry points (for tests);
    `extra_plugins` are (name, module-or-object) pairs registered as well."""
    if autoload is None:
        autoload = not os.environ.get("LAGFIELD_DISABLE_PLUGIN_AUTOLOAD")
    trace = bool(os.environ.get("LAGFIELD_TRACE_PLUGINS"))
    manager = pluggy.PluginManager("lagfield")
    manager.add_hookspecs(hookspecs)
    if trace:
        manager.trace.root.setwriter(print)
        manager.enable_tracing()
    sources: dict[str, str] = {}
    broken: list[BrokenPlugin] = []

    def register(name, label, load):
        try:
            manager.register(load(), name=name)
            sources[name] = label
        except PLUGIN_FAILURES as exc:
            detail = f"{type(exc).__name__}: {exc}"
            if trace:
                detail += "\n" + traceback.format_exc()
            broken.append(BrokenPlugin(name, label, detail))

    if autoload:
        for entry_point in importlib.metadata.entry_points(group=ENTRY_POINT_GROUP):
            register(entry_point.name, _distribution_label(entry_point), entry_point.load)
    for name, plugin in extra_plugins:
        register(name, IN_PROCESS, lambda plugin=plugin: plugin)
    return Registry(manager, sources, broken)


@functools.cache
def get_registry() -> Registry:
    """The registry of installed plugins, built once per process; `refresh()` rebuilds."""
    return build_registry()


def refresh() -> Registry:
    """Forget the cached registry (after installing a plugin in a running process)."""
    get_registry.cache_clear()
    return get_registry()
