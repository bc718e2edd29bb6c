"""Pseudonymisation of subject IDs: stable keyed codes in every output.

Subject IDs are often hospital identifiers that must not leave the institution in a shared
report. A code is ``"P"`` followed by the first 12 hex digits of HMAC-SHA256(key, ID)
(RFC 2104 keyed hashing): the same key gives the same code in every run, and without the key
a code cannot be traced back by hashing candidate IDs. The key comes from a file or the
environment variable :data:`KEY_VARIABLE`; it is never written to any output. The list
linking IDs to codes is written to a separate file, outside the report folder.
"""

from __future__ import annotations

import hashlib
import hmac
import os
import re
from dataclasses import replace
from pathlib import Path

import pandas as pd

from .problems import Problem, StudyError
from .study import Study

KEY_VARIABLE = "COHORT_PSEUDONYM_KEY"
MIN_KEY_BYTES = 16
"""A shorter key could be guessed by trying keys (RFC 2104 recommends at least the hash
output length; 16 bytes is a floor)."""


def load_key(key_file: str | Path | None = None) -> bytes:
    """The pseudonymisation key from ``key_file`` or the environment; a clear error if absent."""
    if key_file is not None:
        path = Path(key_file)
        if not path.is_file():
            raise StudyError(
                [Problem("file-missing", "pseudonym key file not found", file=str(path))]
            )
        key = path.read_bytes().strip()
        where = str(path)
    else:
        key = os.environ.get(KEY_VARIABLE, "").strip().encode()
        where = f"environment variable {KEY_VARIABLE}"
    if len(key) < MIN_KEY_BYTES:
        raise StudyError(
            [
                Problem(
                    "study-option",
                    f"pseudonym key from {where} is missing or shorter than {MIN_KEY_BYTES} bytes",
                    expected=f"a secret of at least {MIN_KEY_BYTES} characters in --key-file or "
                    f"{KEY_VARIABLE}",
                )
            ]
        )
    return key


def pseudonym(subject: str, key: bytes) -> str:
    """The code of one subject ID: ``"P"`` + 12 hex digits of HMAC-SHA256(key, ID)."""
    return "P" + hmac.new(key, subject.encode("utf-8"), hashlib.sha256).hexdigest()[:12]


def code_list(subjects: pd.Series, key: bytes) -> pd.DataFrame:
    """``subject, code`` for every subject; an error if two IDs would share a code."""
    ids = pd.Series(pd.unique(subjects.astype(str)))
    codes = ids.map(lambda s: pseudonym(s, key))
    if codes.duplicated().any():  # 48-bit codes: vanishingly rare, but never silent
        raise RuntimeError("two subject IDs share a pseudonym code; use a longer code")
    return pd.DataFrame({"subject": ids, "code": codes})


def _replace_text(text: str, pattern: re.Pattern[str] | None, mapping: dict[str, str]) -> str:
    if pattern is None:
        return text
    return pattern.sub(lambda m: mapping[m.group(0)], text)


def pseudonymize_study(study: Study, key: bytes) -> tuple[Study, pd.DataFrame]:
    """A copy of ``study`` with every subject ID replaced by its code, and the code list.

    IDs are replaced in the subject columns of all tables and inside the text of loader
    warnings and of the records' cell texts, so no table, figure or report built from the
    returned study contains an original ID.
    """
    codes = code_list(study.subjects["subject"], key)
    mapping = dict(zip(codes["subject"], codes["code"], strict=True))
    ids = sorted(mapping, key=len, reverse=True)
    pattern = re.compile("|".join(re.escape(s) for s in ids)) if ids else None

    def recode(frame: pd.DataFrame) -> pd.DataFrame:
        out = frame.copy()
        out["subject"] = out["subject"].map(lambda s: mapping.get(s, s))
        return out

    records = recode(study.records)
    records["value_text"] = records["value_text"].map(
        lambda t: _replace_text(str(t), pattern, mapping)
    )
    warnings = [
        replace(
            w,
            detail=_replace_text(w.detail, pattern, mapping),
            value=None if w.value is None else _replace_text(w.value, pattern, mapping),
        )
        for w in study.warnings
    ]
    pseudo = replace(
        study,
        subjects=recode(study.subjects),
        values=recode(study.values),
        paired=recode(study.paired),
        records=records,
        warnings=warnings,
    )
    return pseudo, codes
