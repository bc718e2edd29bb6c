"""cohort: cohort statistics for myocardial multi-echo mapping studies.

Research use only; not a diagnostic device. Thresholds need local validation.
"""

__version__ = "0.1.0"
