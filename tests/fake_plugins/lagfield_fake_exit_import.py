"""A plugin that calls sys.exit while it is imported."""

import sys

sys.exit("this plugin refuses to load")
