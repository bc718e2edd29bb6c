"""The input edge: files to a checked :class:`~cohort.io.study.Study` (reading tables, the
study file, validation, harmonising units, pairing, pseudonyms).

Internal: the supported API is :mod:`cohort` and :mod:`cohort.stats`.
"""
