"""A plugin whose importer object lacks the required `can_read` and `read`."""

import lagfield


class HalfImporter:
    name = "half"
    description = "an importer missing its methods"
    extensions = (".half",)


@lagfield.hookimpl
def lagfield_register_importers():
    return [HalfImporter()]
