"""Reports: overlay images, JSON/CSV writers, the self-contained HTML report and its plots.

Only this subpackage writes output files.  Import the module you need
(``printcheck.report.files``, ``.overlay``, ``.html``, ``.plots``); importing the package
itself loads nothing heavy.
"""

__all__: list[str] = []
