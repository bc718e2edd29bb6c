"""The cautions every output carries: the one place for their wording."""

CAUTION = (
    "Research use only: not a diagnostic device. Thresholds and defaults need local "
    "validation; defer to local clinical practice and licensed professionals."
)

CAUTION_LONG = (
    "This report is produced by research software for method-comparison research. It is not "
    "a diagnostic device and none of its content is a clinical finding about any person. "
    "Every threshold and default is a starting point that must be validated for the local "
    "protocol, scanner and population before its results are interpreted. Defer to local "
    "clinical practice and to licensed professionals for any decision about a patient."
)
