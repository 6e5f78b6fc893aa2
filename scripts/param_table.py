#!/usr/bin/env python3
"""Print the parameter table of README.md from the schema (the single source of truth).

tests/test_docs.py checks that README.md holds exactly this table.
"""

from __future__ import annotations

import sys

from rtvoice.engine.schema import PARAMS, PICKUP_FIELDS, Param

BEGIN, END = "<!-- params:begin -->", "<!-- params:end -->"


def _row(name: str, p: Param) -> str:
    default = p.default if p.kind != "shape" else "[]"
    if isinstance(default, float):
        default = f"{default:g}"
    when = "live" if p.live else ("rebuilds pool" if p.structural else "next note")
    return f"| `{name}` | {p.unit or '-'} | {default} | {p.describe_range()} | {when} | {p.help} |"


def table() -> str:
    lines = [BEGIN, "| name | unit | default | allowed | takes effect | meaning |", "|---|---|---|---|---|---|"]
    lines += [_row(n, p) for n, p in PARAMS.items()]
    lines += [_row(f"pickup.N.{f}", p) for f, p in PICKUP_FIELDS.items()]
    lines.append(END)
    return "\n".join(lines)


if __name__ == "__main__":
    sys.stdout.write(table() + "\n")
