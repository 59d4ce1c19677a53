#!/usr/bin/env python3
"""Rewrite the parameter reference in docs/parameters.md from the settings schema (or check it with --check)."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

from wheel_dr.docs import BEGIN_MARK, END_MARK, parameter_table


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--check", action="store_true", help="exit 1 if the reference is out of date")
    parser.add_argument("--file", default=str(Path(__file__).resolve().parents[1] / "docs" / "parameters.md"),
                        help="the Markdown file holding the reference markers (default docs/parameters.md)")
    args = parser.parse_args()
    path = Path(args.file)
    text = path.read_text(encoding="utf-8")
    head, sep, rest = text.partition(BEGIN_MARK)
    _, sep2, tail = rest.partition(END_MARK)
    if not sep or not sep2:
        print(f"{path} has no parameter-reference markers; add {BEGIN_MARK} and {END_MARK}.", file=sys.stderr)
        return 2
    new = f"{head}{BEGIN_MARK}\n{parameter_table()}\n{END_MARK}{tail}"
    if args.check:
        if new != text:
            print(f"{path}'s parameter reference is out of date; run tools/param_reference.py.", file=sys.stderr)
            return 1
        return 0
    path.write_text(new, encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
