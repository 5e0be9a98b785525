"""A plugin that imports but calls sys.exit while registering its importers."""

import sys

import lagfield


@lagfield.hookimpl
def lagfield_register_importers():
    sys.exit(4)
