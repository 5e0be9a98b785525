"""A plugin whose importer gives its extensions as one string, not a tuple of them."""

import lagfield


class StringExtensionImporter:
    name = "stringext"
    description = "an importer with extensions = '.trk'"
    extensions = ".trk"

    def can_read(self, path):
        return True

    def read(self, path, options):
        raise AssertionError("never called")


@lagfield.hookimpl
def lagfield_register_importers():
    return [StringExtensionImporter()]
