"""A small exporter: writes the run summary and the number of field rows as JSON."""

import json

import lagfield


class SummaryExporter:
    name = "summary-json"
    description = "the run summary as summary.json"
    requires = ("json",)

    def write(self, result, directory, options):
        facts = dict(result.summary, field_rows=len(result.fields), **options)
        (directory / "summary.json").write_text(json.dumps(facts))
        return ["summary.json"]


@lagfield.hookimpl
def lagfield_register_exporters():
    return [SummaryExporter()]
