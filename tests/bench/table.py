"""How every benchmark prints its figures: name, value, unit, and the goal or ceiling."""

from __future__ import annotations

Row = tuple[str, float, str, str]


def show(rows: list[Row], decimals: int = 1) -> None:
    for name, value, unit, note in rows:
        print(f"{name:<44} {value:>10.{decimals}f} {unit:<6} {note}")
