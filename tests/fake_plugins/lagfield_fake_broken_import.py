"""A plugin that cannot be imported: it needs a package that is not installed."""

raise ImportError("this plugin needs the package 'trk_native_reader', which is not installed")
