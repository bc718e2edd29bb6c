"""A :class:`~cohort.io.study.Study` to tidy tables: agreement, findings and their agreement,
alerts, group comparisons, display summaries; :func:`~cohort.analysis.pipeline.analyse` runs
them all.

Internal: the supported API is :mod:`cohort` and :mod:`cohort.stats`.
"""
