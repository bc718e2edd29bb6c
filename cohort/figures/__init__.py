"""The report's figures and their captions, drawn from the analysis's tables.

Internal: the supported API is :mod:`cohort` and :mod:`cohort.stats`.
"""
