"""Drawing given numbers (bullseye maps, Bland-Altman and scatter plots, group plots) in the
house style; never a Study.

Internal: the supported API is :mod:`cohort` and :mod:`cohort.stats`.
"""
