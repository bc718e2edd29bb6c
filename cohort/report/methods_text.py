"""The methods paragraph of a run (``methods.md``) and the reference list, built from what ran.

Every sentence is generated from the run's options, thresholds and tables, so the text says
exactly what was computed; it is meant to be edited into a manuscript.
"""

from __future__ import annotations

from collections.abc import Iterable

import pandas as pd

from cohort.analysis.pipeline import Analysis
from cohort.domain.segments import segment_model
from cohort.domain.units import PARAMETERS
from cohort.domain.wording import percent_level
from cohort.report.methods_acceptance import (
    CORRECTIONS,
    acceptance_lines,
    alert_lines,
    difference_lines,
)
from cohort.report.methods_acceptance import REFERENCES as ACCEPTANCE_REFERENCES
from cohort.stats.regression import PB_WEIGHTED_MAX_N

REFERENCES: dict[str, str] = {
    "cerqueira2002": "Cerqueira MD, Weissman NJ, Dilsizian V, et al. Standardized myocardial "
    "segmentation and nomenclature for tomographic imaging of the heart. Circulation "
    "2002;105:539-542.",
    "bland1986": "Bland JM, Altman DG. Statistical methods for assessing agreement between two "
    "methods of clinical measurement. Lancet 1986;i:307-310.",
    "bland1999": "Bland JM, Altman DG. Measuring agreement in method comparison studies. Stat "
    "Methods Med Res 1999;8:135-160.",
    "bland2007": "Bland JM, Altman DG. Agreement between methods of measurement with multiple "
    "observations per individual. J Biopharm Stat 2007;17:571-582.",
    "zou2013": "Zou GY. Confidence interval estimation for the Bland-Altman limits of agreement "
    "with multiple observations per individual. Stat Methods Med Res 2013;22:630-642.",
    "carkeet2015": "Carkeet A. Exact parametric confidence intervals for Bland-Altman limits of "
    "agreement. Optom Vis Sci 2015;92:e71-e80.",
    "lin1989": "Lin LI. A concordance correlation coefficient to evaluate reproducibility. "
    "Biometrics 1989;45:255-268.",
    "mcgraw1996": "McGraw KO, Wong SP. Forming inferences about some intraclass correlation "
    "coefficients. Psychol Methods 1996;1:30-46.",
    "bakdash2017": "Bakdash JZ, Marusich LR. Repeated measures correlation. Front Psychol "
    "2017;8:456.",
    "bland1995": "Bland JM, Altman DG. Calculating correlation coefficients with repeated "
    "observations: Part 1 - correlation within subjects. BMJ 1995;310:446.",
    "passing1983": "Passing H, Bablok W. A new biometrical procedure for testing the equality of "
    "measurements from two different analytical methods. J Clin Chem Clin Biochem "
    "1983;21:709-720.",
    "linnet1993": "Linnet K. Evaluation of regression procedures for methods comparison studies. "
    "Clin Chem 1993;39:424-432.",
    "field2007": "Field CA, Welsh AH. Bootstrapping clustered data. J R Stat Soc B "
    "2007;69:369-390.",
    "newcombe1998": "Newcombe RG. Two-sided confidence intervals for the single proportion: "
    "comparison of seven methods. Stat Med 1998;17:857-872.",
    "cohen1960": "Cohen J. A coefficient of agreement for nominal scales. Educ Psychol Meas "
    "1960;20:37-46.",
    "holm1979": "Holm S. A simple sequentially rejective multiple test procedure. Scand J Stat "
    "1979;6:65-70.",
    "bh1995": "Benjamini Y, Hochberg Y. Controlling the false discovery rate: a practical and "
    "powerful approach to multiple testing. J R Stat Soc B 1995;57:289-300.",
    "storey2007": "Storey P, Thompson AA, Carqueville CL, et al. R2* imaging of transfusional "
    "iron burden at 3T and comparison with 1.5T. J Magn Reson Imaging 2007;25:540-547.",
    "kottner2011": "Kottner J, Audige L, Brorson S, et al. Guidelines for Reporting Reliability "
    "and Agreement Studies (GRRAS) were proposed. J Clin Epidemiol 2011;64:96-106.",
}


def _join(items: Iterable[str]) -> str:
    items = list(items)
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]


def _threshold_sentences(thresholds: pd.DataFrame) -> list[str]:
    lines = []
    for finding, rows in thresholds.groupby("finding", sort=False):
        first = rows.iloc[0]
        rules = [
            f"{row['rule']}" + (" (derived)" if bool(row["derived"]) else "")
            for _, row in rows.iterrows()
        ]
        lines.append(
            f"- **{finding}** ({first['label']}): {'; '.join(rules)}; a subject was positive "
            f"with at least {int(first['min_segments'])} positive segment(s). "
            f"Source: {'; '.join(dict.fromkeys(rows['source']))}."
        )
    return lines


def _plausibility_sentence(settings) -> str:
    """The plausibility limits applied when the values were read, and what they did."""
    c = settings.checks
    low, high = c.ff_limits(settings.ff_unit)
    ff = f"{low:g} to {high:g}" + (" %" if settings.ff_unit == "percent" else "")
    action = (
        "values outside them were excluded and listed with the limit they broke"
        if c.implausible == "exclude"
        else "a study with values outside them would have been refused"
    )
    return (
        f"Plausibility limits: fat fraction {ff}, R2* 0 to {c.r2star_max:g} 1/s, "
        f"|field| at most {c.field_max_abs_hz:g} Hz; {action}."
    )


def methods_markdown(analysis: Analysis) -> str:
    """A ready-to-edit methods section (Markdown) describing exactly the analyses that ran."""
    text = [
        "# Methods (generated by cohort; edit before use)",
        "",
        "## Data",
        _data_paragraph(analysis),
        "",
        "## Agreement",
        _agreement_paragraph(analysis),
        "",
        _intervals_paragraph(analysis),
        "",
        "## Findings",
        *_findings_lines(analysis),
        *alert_lines(analysis),
        *acceptance_lines(analysis),
        *difference_lines(analysis),
        *_groups_lines(analysis),
        "",
        "## Reporting",
        "The report follows the items of the GRRAS guidelines where they apply [kottner2011]. "
        "Analyses were run with cohort (research software; not a diagnostic device).",
        "",
        "## References",
        *[f"- [{key}] {ref}" for key, ref in {**REFERENCES, **ACCEPTANCE_REFERENCES}.items()],
        "",
    ]
    return "\n".join(text)


def _data_paragraph(analysis: Analysis) -> str:
    """Parameters, subjects, segment model, reference, conversions, referencing, records."""
    study = analysis.study
    s = study.settings
    model = segment_model(s.segment_model)
    params = [PARAMETERS[p].description + f" ({PARAMETERS[p].unit})" for p in study.parameters]
    n_subj = len(study.subjects)
    groups = study.groups
    return (
        f"Per-segment values of {_join(params)} were analysed in {n_subj} subjects "
        f"({_join(f'{study.group_label(g)}: {(study.subjects.group == g).sum()}' for g in groups)})"
        " "
        "using the "
        f"AHA {len(model.numbers)}-segment model [cerqueira2002]. The method "
        f"{_method_name(study, study.reference)} served as reference; "
        f"{_join(_method_name(study, m) for m in study.test_methods)} "
        f"{'was' if len(study.test_methods) == 1 else 'were'} "
        "compared with it on the segments where both methods had a value. "
        + (
            "T2* values were converted to R2* = 1000/T2*. "
            if (
                study.records["input_parameter"].astype(str).eq("t2star")
                & study.records["status"].astype(str).eq("used")
            ).any()
            else ""
        )
        + "Field maps were referenced within each subject and method "
        + {
            "none": "(not referenced: absolute values compared). ",
            "subject-median": "by subtracting the median over its paired segments (values "
            "without a partner in the comparison were excluded and not used). ",
            "remote": f"by subtracting the median of its paired values in segments "
            f"{list(s.remote_segments)} (values without a partner were excluded and not "
            "used; a subject without such a value was excluded for that method). ",
        }[s.field_referencing]
        + f"Of {analysis.tables['record_accounting']['records_in'].item()} input values, "
        f"{analysis.tables['record_accounting']['used'].item()} were used, "
        f"{analysis.tables['record_accounting']['missing'].item()} were missing and "
        f"{analysis.tables['record_accounting']['excluded'].item()} were excluded "
        "(reasons listed in the exclusions table). " + _plausibility_sentence(s)
    )


def _method_name(study, method: str) -> str:
    """A method as the methods text names it: its label, with its name where they differ."""
    label = study.method_label(method)
    return f"'{method}'" if label == method else f"{label} ('{method}')"


def _agreement_paragraph(analysis: Analysis) -> str:
    """Bias and limits, proportional bias, ratio scale, concordance, regression."""
    study, o = analysis.study, analysis.options
    return (
        "Differences were computed as test minus reference. Because segments are nested within "
        "subjects, the bias and 95% limits of agreement were estimated with the method of Bland "
        "and Altman for multiple observations per individual where the true value varies "
        "[bland2007], with between- and within-subject variance components from a one-way "
        "analysis of variance of the differences on subject; limits of agreement on per-subject "
        "mean differences [bland1986] are reported as a secondary analysis. Proportional bias "
        "was assessed by the slope of the difference on the mean of the two methods"
        + (
            "; regression-based limits of agreement [bland1999] were computed. "
            if o.regression_limits
            else ". "
        )
        + (
            f"{_join(PARAMETERS[p].label for p in o.ratio_parameters if p in study.parameters)} "
            "agreement was also expressed on the ratio scale (natural logarithm of test/reference, "
            "limits back-transformed to ratios). "
            if any(p in study.parameters for p in o.ratio_parameters)
            else ""
        )
        + "Concordance was summarised by Lin's concordance correlation coefficient [lin1989] and "
        "the two-way, absolute-agreement, single-measurement intraclass correlation ICC(A,1) "
        "[mcgraw1996]; association by Pearson's and Spearman's correlation and the "
        "repeated-measures correlation [bakdash2017, bland1995]. Passing-Bablok [passing1983] "
        f"and Deming regression (error-variance ratio {o.error_ratio:g}) [linnet1993] "
        "estimated constant and proportional differences; the Passing-Bablok cluster "
        f"bootstrap weights the enumerated slopes per resample (rows of up to {PB_WEIGHTED_MAX_N} "
        "pairs; larger rows report the rank-based interval, which ignores the clustering, "
        "and say so in the table)"
        + (
            f"; rows of more than {o.pb_max_pairs:,} pairs have no Passing-Bablok fit, for "
            "its cost (their note says so)."
            if (analysis.tables["agreement"]["n_pairs"] > o.pb_max_pairs).any()
            else "."
        )
    )


def _intervals_paragraph(analysis: Analysis) -> str:
    """How the confidence intervals were obtained, and the strata."""
    o = analysis.options
    level = percent_level(o.confidence_level)
    analytic = (
        "(Zou's MOVER for the limits [zou2013], exact intervals for per-subject "
        "limits [carkeet2015], Fisher's z, Lin's z and the F-based ICC interval)"
    )
    if o.n_boot == 0:
        intervals = (
            f"No cluster bootstrap was run (B = 0): the {level} confidence intervals are the "
            f"analytic intervals {analytic} named in each table row; several of them treat the "
            "segments of a subject as independent observations and are then too narrow."
        )
    else:
        intervals = (
            f"Unless stated otherwise, {level} confidence intervals are percentile intervals "
            f"of a subject-level cluster bootstrap [field2007] with B = {o.n_boot} resamples of "
            f"subjects (seed {o.seed}), so that all segments of a subject are resampled "
            f"together; analytic intervals {analytic} are reported beside them."
        )
    return (
        intervals
        + " Results are given for all subjects and by "
        + _join(
            [
                {"group": "group", "ring": "ring", "territory": "coronary territory"}[x]
                for x in o.strata
                if x != "all"
            ]
            or ["none"]
        )
        + ", and for reference-positive and reference-negative segments of each finding."
    )


def _findings_lines(analysis: Analysis) -> list[str]:
    """Thresholds in force, finding-level agreement, the deceptive-agreement and swap screens."""
    o = analysis.options
    return [
        "Segments were classified as positive for each finding with these thresholds (they "
        "need validation for the local protocol):",
        *_threshold_sentences(analysis.tables["thresholds"]),
        "",
        "Finding-level agreement of each test method with the reference was assessed at segment, "
        "territory and subject level by sensitivity, specificity, positive and negative "
        f"predictive values with Wilson score intervals [newcombe1998] (segment and territory "
        f"level also with the subject cluster bootstrap, B = {o.n_boot}), Cohen's kappa "
        "[cohen1960] and the exact McNemar test. Every reference-positive unit that a test "
        "method did not flag is listed. Fat fractions were "
        "screened for fat-water swaps (test value closer to 100 minus the reference than to "
        "the reference).",
    ]


def _groups_lines(analysis: Analysis) -> list[str]:
    """The group comparisons and their multiple-testing correction (when they ran)."""
    o = analysis.options
    text: list[str] = []
    if "group_comparison" in analysis.tables:
        correction = CORRECTIONS[o.correction]
        text += [
            "",
            "## Group comparisons",
            "Per-subject summaries (mean over segments, maximum segment, mean over the culprit "
            "territory) were compared between groups; segment-level models with a random "
            "intercept per subject and generalised estimating equations clustered by subject "
            f"respected the nesting of segments. P-values were adjusted with {correction} within "
            "the families stated in the group-comparison table; raw and adjusted values are "
            "reported.",
        ]
    return text
