"""The generated report: Markdown and self-contained HTML with tables and figures, from the store only.

``write_report(store, output, suite=None)`` reads every stored result (or, with task keys, those of
a suite), attaches the reference values (``tables.attach_references``) and writes

- ``output/report.md``: the Markdown report, figures linked from ``figures/``;
- ``output/report.html``: the same document with the figures embedded (base64 PNG), one file to share;
- ``output/figures/*.png`` and ``output/tables/*.csv`` (the numbers behind each table and figure).

The work is split by job: ``analysis`` (frame in, table out), ``figures`` (one module per figure
family: select, draw, caption), ``document`` (the model and its Markdown and HTML renderings) and
``assemble`` (the sections in order). Cost is the CPU time of the solve; peak memory is the task
process's resident peak, which includes the libraries preloaded by the runner (the same few tens
of MiB for every task).
"""

from .assemble import build_document, write_report

__all__ = ["build_document", "write_report"]
