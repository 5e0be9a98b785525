"""A plugin that imports but fails while registering its importers."""

import lagfield


@lagfield.hookimpl
def lagfield_register_importers():
    raise RuntimeError("the importer table could not be built")
