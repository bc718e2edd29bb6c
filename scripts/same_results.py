"""Compare the tables of two `cohort run` output folders byte for byte.

Used when a change must not alter results (a refactor): run the demo before and after,
then ``python scripts/same_results.py BEFORE/ AFTER/``. Exit status 0 when every table under
``tables/``, ``methods.md`` and the list of figure files are identical; 1 otherwise, with
the differing files named. The manifest and the report page hold run times and are not
compared.
"""

from __future__ import annotations

import sys
from pathlib import Path

COMPARED = ("tables/*.csv", "tables/*.parquet", "methods.md")


def differences(before: Path, after: Path) -> list[str]:
    """Names of the compared files that differ, are missing or are new."""
    out = []
    for pattern in COMPARED:
        names = {p.relative_to(before) for p in before.glob(pattern)}
        names |= {p.relative_to(after) for p in after.glob(pattern)}
        for name in sorted(names):
            a, b = before / name, after / name
            if not a.exists() or not b.exists():
                out.append(f"{name}: only in {'after' if b.exists() else 'before'}")
            elif a.read_bytes() != b.read_bytes():
                out.append(f"{name}: contents differ")
    figures = [sorted(p.name for p in (d / "figures").glob("*")) for d in (before, after)]
    if figures[0] != figures[1]:
        out.append("figures/: different file names")
    return out


def main(argv: list[str]) -> int:
    if len(argv) != 2:
        print(__doc__)
        return 2
    found = differences(Path(argv[0]), Path(argv[1]))
    for line in found:
        print(line)
    print("identical" if not found else f"{len(found)} difference(s)")
    return 1 if found else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
