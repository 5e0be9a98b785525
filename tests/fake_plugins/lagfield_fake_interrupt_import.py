"""A plugin whose import is interrupted (as by Ctrl-C)."""

raise KeyboardInterrupt
