"""The ``cohort`` command and ``python -m cohort``: the command line of :mod:`cohort.cli`,
loaded so that Ctrl-C while the numerical libraries load ends quietly (exit status 130)."""

from __future__ import annotations

import sys


def main() -> int:
    try:
        from cohort.cli import main as command_line
    except KeyboardInterrupt:
        print("cohort: interrupted while starting; nothing was written", file=sys.stderr)
        return 130
    return command_line()


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
