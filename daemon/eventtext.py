"""Rig events as one readable line each, for the log (`taprigd run` without --json-events).

The JSON form of an event is for programs; a person reading the journal gets a sentence:
"hit at B3: counted, 2 of 5 averages (peak 31.2 N)", not a dict.
"""

from __future__ import annotations

from typing import Any

from .rigstate import RigEvent


def count(n: int, singular: str, plural: str | None = None) -> str:
    """`n` and the noun, singular for exactly one, else plural (default +"s")."""
    return f"{n} {singular if n == 1 else (plural or singular + 's')}"


def event_text(event: RigEvent) -> str:
    """One line describing `event`."""
    d, kind = event.data, event.kind
    if kind == "message":
        return str(d.get("text", ""))
    if kind == "device":
        detail = d.get("detail")
        return f"device {d.get('state')}" + (f": {detail}" if detail else "")
    if kind == "hit":
        return _hit(d)
    if kind == "completed":
        return (f"point {d.get('point')} complete: {count(int(d.get('averages', 0)), 'average')}"
                f" stored as version {d.get('version')} (change {d.get('seq')})")  # fmt: skip
    if kind == "cursor":
        return _cursor(d)
    return f"{kind}: " + ", ".join(f"{k} {v}" for k, v in d.items())


def _hit(d: dict[str, Any]) -> str:
    where = f"hit at {d.get('point')}"
    force = d.get("peak_force_n")
    peak = f" (peak {force:.1f} N)" if isinstance(force, int | float) else ""
    if d.get("waiting"):
        return f"{where}: waiting for the operator to accept or reject{peak}"
    if d.get("counted"):
        return f"{where}: counted, {count(int(d.get('averages', 0)), 'average')} so far{peak}"
    reasons = "; ".join(str(message) for _, message in d.get("rejections", ()))
    return f"{where}: rejected: {reasons or 'by the operator'}{peak}"


def _cursor(d: dict[str, Any]) -> str:
    if "armed" not in d:  # a test selected
        return f"test {d.get('test')} selected, at point {d.get('point')}"
    if d.get("test") is None:
        return f"{'armed' if d.get('armed') else 'not armed'}; no test selected"
    done, need = len(d.get("done", ())), count(int(d.get("required", 0)), "average")
    return (f"{'armed' if d.get('armed') else 'not armed'}; test {d.get('test')} at "
            f"{d.get('point')}, {d.get('averages')} of {need}; {count(done, 'point')} done; "
            f"device {d.get('state')}")  # fmt: skip
