"""Facts and rules as data, no file I/O: segment models, units, finding thresholds with
their sources, the catalogue of input problems, the rules of every study-file key, cautions.

Internal: the supported API is :mod:`cohort` and :mod:`cohort.stats`.
"""
