"""Shared test helpers: write small invented studies to a temporary folder."""

from __future__ import annotations

import csv
from pathlib import Path

import pytest

from cohort.domain.problems import StudyError
from cohort.io.settings import build_settings
from cohort.io.study import load_study

HEADER = ["subject", "method", "segment", "parameter", "value"]


def small_values(subjects=("0017", "0018", "0019"), methods=("ref", "fast"), segments=range(1, 18)):
    """Rows of a valid long values table (invented numbers)."""
    rows = []
    for i, s in enumerate(subjects):
        for m, method in enumerate(methods):
            for seg in segments:
                rows.append([s, method, seg, "ff", round(1.0 + 0.1 * seg + 0.2 * m + i, 2)])
                rows.append([s, method, seg, "r2star", round(25.0 + seg + m - i, 2)])
                rows.append([s, method, seg, "field", round(10.0 + seg + 3 * m, 2)])
    return rows


def small_subjects(subjects=("0017", "0018", "0019")):
    groups = ["control", "acute", "chronic"]
    return [[s, groups[i % 3], 1.5 if i % 2 == 0 else 3.0, 50 + i] for i, s in enumerate(subjects)]


def write_csv(path: Path, header, rows, delimiter=","):
    with path.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle, delimiter=delimiter)
        writer.writerow(header)
        writer.writerows(rows)
    return path


@pytest.fixture
def make_study(tmp_path):
    """Write a study and return its settings; pass rows or headers to change it."""

    def make(
        values=None,
        subjects=None,
        values_header=HEADER,
        subjects_header=("subject", "group", "field_strength", "age"),
        reference="ref",
        **options,
    ):
        vpath = write_csv(
            tmp_path / "values.csv", values_header, values if values is not None else small_values()
        )
        spath = write_csv(
            tmp_path / "subjects.csv",
            subjects_header,
            subjects if subjects is not None else small_subjects(),
        )
        options.setdefault("groups", ("control", "acute", "chronic"))
        return build_settings(values=vpath, subjects=spath, reference=reference, **options)

    return make


def problems_of(settings):
    """The problems of the StudyError that loading ``settings`` raises."""
    with pytest.raises(StudyError) as info:
        load_study(settings)
    return info.value.problems


def coded(problems, code):
    """The problems with ``code``; fails when there is none."""
    found = [p for p in problems if p.code == code]
    assert found, f"no {code!r} problem among {[str(p) for p in problems[:5]]}"
    return found
