"""How every benchmark prints its figures: name, value, unit, and the goal or ceiling;
and the summary `run.py` ends with, one headline figure a line beside its goal and ceiling."""

from __future__ import annotations

import math
from dataclasses import dataclass

Row = tuple[str, float, str, str]


def show(rows: list[Row], decimals: int = 1) -> None:
    for name, value, unit, note in rows:
        print(f"{name:<44} {value:>10.{decimals}f} {unit:<6} {note}")


@dataclass(frozen=True)
class Figure:
    """A headline figure: the value measured, its goal (`better` "<=" or ">=" than `goal`),
    and its ceiling: the best any implementation could do, measured in the same run
    (`ceiling` in `unit`, NaN where none is measured) and what that ceiling is."""

    name: str
    value: float
    unit: str
    better: str
    goal: float
    ceiling: float
    ceiling_what: str

    @property
    def met(self) -> bool:
        return self.value <= self.goal if self.better == "<=" else self.value >= self.goal


def pick(rows: list[Row], prefix: str) -> float:
    """The value of the first row whose name starts with `prefix`."""
    return next(value for name, value, _, _ in rows if name.startswith(prefix))


def summary(figures: list[Figure]) -> None:
    head = ("figure", "measured", "goal", "ceiling", "unit", "met", "ceiling is")
    print("{:<36} {:>9}  {:>10}  {:>9}  {:<9} {:<3}  {}".format(*head))
    for f in figures:
        goal = f"{f.better} {f.goal:.3g}"
        ceiling = "-" if math.isnan(f.ceiling) else f"{f.ceiling:.3g}"
        met = "yes" if f.met else "NO"
        print(
            f"{f.name:<36} {f.value:>9.3g}  {goal:>10}  {ceiling:>9}  {f.unit:<9} {met:<3}  "
            f"{f.ceiling_what}"
        )
