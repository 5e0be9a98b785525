"""Plugin discovery: builds the name -> plugin tables from the entry-point group
``lagfield.plugins``. A plugin that fails to load or registers malformed objects becomes a
`BrokenPlugin` that is reported by name; it never stops the others from working."""

from __future__ import annotations

import dataclasses
import functools
import importlib.metadata
import os
import traceback

import pluggy

from . import hookspecs
from .errors import PluginError

ENTRY_POINT_GROUP = "lagfield.plugins"
IMPORTER_ATTRIBUTES = ("name", "description", "extensions", "can_read", "read")
EXPORTER_ATTRIBUTES = ("name", "description", "write")


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


class Registry:
    """The importers and exporters available, built from one plugin manager."""

    def __init__(self, manager: pluggy.PluginManager, sources: dict[str, str],
                 broken: list[BrokenPlugin]):
        self.manager = manager
        self.broken = list(broken)
        self.importers: dict[str, list[PluginInfo]] = {}
        self.exporters: dict[str, list[PluginInfo]] = {}
        self._collect("importer", manager.hook.lagfield_register_importers, sources,
                      IMPORTER_ATTRIBUTES, self.importers)
        self._collect("exporter", manager.hook.lagfield_register_exporters, sources,
                      EXPORTER_ATTRIBUTES, self.exporters)

    def _collect(self, kind, hook, sources, required, table):
        for impl in hook.get_hookimpls():
            plugin_name = self.manager.get_name(impl.plugin) or repr(impl.plugin)
            distribution = sources.get(plugin_name, "(registered in-process)")
            try:
                objects = impl.function()
                for obj in objects or ():
                    missing = [a for a in required if not hasattr(obj, a)]
                    if missing:
                        raise TypeError(f"{kind} object {obj!r} lacks {', '.join(missing)}")
                    table.setdefault(obj.name, []).append(
                        PluginInfo(kind, obj.name, obj, distribution))
            except Exception as exc:  # a broken plugin must not break the others
                self.broken.append(BrokenPlugin(plugin_name, distribution,
                                                f"{type(exc).__name__}: {exc}"))

    def _select(self, kind: str, table: dict[str, list[PluginInfo]], name: str):
        for broken in self.broken:
            if broken.name == name:
                raise PluginError(f"{kind} '{name}' ({broken.distribution}) failed to load: "
                                  f"{broken.error}")
        infos = table.get(name)
        if not infos:
            known = ", ".join(sorted(table)) or "none"
            raise PluginError(f"no {kind} named '{name}' is installed (installed: {known})")
        if len(infos) > 1:
            origins = " and ".join(i.distribution for i in infos)
            raise PluginError(f"{kind} name '{name}' is registered twice, by {origins}")
        info = infos[0]
        for module in getattr(info.plugin, "requires", ()) or ():
            try:
                __import__(module)
            except ImportError as exc:
                raise PluginError(f"{kind} '{name}' ({info.distribution}) needs the package "
                                  f"'{module}': {exc}") from None
        return info.plugin

    def importer(self, name: str):
        """The importer called `name`; a clear PluginError if it is missing or broken."""
        return self._select("importer", self.importers, name)

    def exporter(self, name: str):
        """The exporter called `name`; a clear PluginError if it is missing or broken."""
        return self._select("exporter", self.exporters, name)

    def importer_for(self, path) -> object:
        """The importer that claims the suffix of `path` and says it can read it."""
        suffix = "".join(path.suffixes[-1:]).lower()
        candidates = [infos[0].plugin for infos in self.importers.values()
                      if suffix in tuple(e.lower() for e in infos[0].plugin.extensions)]
        if not candidates:
            known = sorted({e for infos in self.importers.values()
                            for e in infos[0].plugin.extensions})
            raise PluginError(f"no importer claims files ending in '{suffix or '(none)'}' "
                              f"({path}); known endings: {', '.join(known)}; "
                              "set [tracks] format to choose one")
        return candidates[0]


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
    if autoload:
        for entry_point in importlib.metadata.entry_points(group=ENTRY_POINT_GROUP):
            label = _distribution_label(entry_point)
            try:
                module = entry_point.load()
                manager.register(module, name=entry_point.name)
                sources[entry_point.name] = label
            except Exception as exc:
                detail = f"{type(exc).__name__}: {exc}"
                if trace:
                    detail += "\n" + traceback.format_exc()
                broken.append(BrokenPlugin(entry_point.name, label, detail))
    for name, plugin in extra_plugins:
        try:
            manager.register(plugin, name=name)
            sources[name] = "(registered in-process)"
        except Exception as exc:
            broken.append(BrokenPlugin(name, "(registered in-process)",
                                       f"{type(exc).__name__}: {exc}"))
    return Registry(manager, sources, broken)


@functools.cache
def get_registry() -> Registry:
    """The registry of installed plugins, built once per process; `refresh()` rebuilds."""
    return build_registry()


def refresh() -> Registry:
    """Forget the cached registry (after installing a plugin in a running process)."""
    get_registry.cache_clear()
    return get_registry()
