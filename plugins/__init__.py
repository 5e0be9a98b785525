"""Built-in plugins of lagfield, found through the entry-point group ``lagfield.plugins``
like any in-house plugin (never imported by the core directly)."""
