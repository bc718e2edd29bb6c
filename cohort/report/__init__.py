"""The output edge: the output folder (destination rules), tables, workbook, methods text,
HTML report, manifest and :func:`~cohort.report.runner.run`.

Internal: the supported API is :mod:`cohort` and :mod:`cohort.stats`.
"""
