"""The wire's records made from the daemon's (schema.records), and the schema's imports.

Tests may import the daemon; the schema itself does not.
"""

from __future__ import annotations

import dataclasses
import json
import subprocess
import sys

from taprig.daemon.records import Finding, GridPoint, PointSet, RovingMode, StoredHit
from taprig.daemon.store import Change, TestPlan
from taprig.schema import objects, records
from taprig.schema.pointset import field_values

from .fixtures import make_point_set, same_bits, through_wire


def test_a_daemon_point_set_goes_out_whole() -> None:
    """The daemon's PointSet (same declared fields) becomes a WirePointSet: a str roving mode,
    findings as (code, sentence) pairs, the arrays' bits untouched."""
    w = make_point_set(n_hits=1)
    hit = w.hits[0]
    stored = StoredHit(hit.trigger_index, hit.utc, hit.accepted, hit.peak_force_n,
                       hit.pulse_width_s, (Finding("soft", "weak tap"),), hit.data,
                       hit.scale)  # fmt: skip
    ps = PointSet(**{**field_values(w), "roving_mode": RovingMode.SENSOR}, hits=(stored,))
    back = through_wire(records.point_set_from_record(w.id, ps))
    assert back.id == w.id and back.point == w.point and back.meta == w.meta
    assert back.roving_mode == "sensor" and type(back.roving_mode) is str
    assert back.hits[0].findings == (("soft", "weak tap"),)
    assert back.hits[0].data is not None and hit.data is not None
    assert same_bits(back.hits[0].data, hit.data)
    assert back.hits[0].scale is not None and hit.scale is not None
    assert same_bits(back.hits[0].scale, hit.scale)
    for name in ("freq_hz", "gfx", "coherence"):
        assert same_bits(getattr(back, name), getattr(w, name)), name


def test_the_daemons_records_have_the_wires_fields() -> None:
    """Both forms of a point set and of a hit extend one declaration: the same fields in the
    same order, the wire's point set adding only its store id."""
    names = [f.name for f in dataclasses.fields(records.WirePointSet)]
    assert names == [f.name for f in dataclasses.fields(PointSet)] + ["id"]
    hit_names = [f.name for f in dataclasses.fields(records.WireHit)]
    assert hit_names == [f.name for f in dataclasses.fields(StoredHit)]


def test_listings_tests_and_changes_from_the_daemon() -> None:
    summary = records.WirePointSetSummary(5, "plate-2025", "C4", 3, 44, "2025-03-04T10:00Z", 4)
    js = json.loads(json.dumps(objects.point_set_summary_json(summary)))
    assert objects.point_set_summary_from_json(js) == summary

    grid = (GridPoint("A1", 0.0, 0.1, 0.0), GridPoint("A2", 0.05, 0.1, 0.0, "-z"))
    plan = TestPlan("plate-2025", grid, RovingMode.HAMMER, "A2", 3, {"k": 1}, "2025-03-01Z", 1)
    obj = objects.test_to_obj(records.test_from_record(plan))
    t = objects.test_from_obj(json.loads(json.dumps(obj)))
    assert t.grid == (("A1", 0.0, 0.1, 0.0, "+z"), ("A2", 0.05, 0.1, 0.0, "-z"))
    assert (t.name, t.roving_mode, t.reference, t.averages, t.meta) == (
        "plate-2025", "hammer", "A2", 3, {"k": 1})  # fmt: skip

    c = records.change_from_record(Change(9, "point_set", "plate-2025", 5))
    assert objects.change_from_obj(json.loads(json.dumps(objects.change_to_obj(c)))) == c


def test_schema_does_not_import_the_daemon() -> None:
    code = (
        "import sys, taprig.schema.codec, taprig.schema.http, taprig.schema.objects\n"
        "bad = sorted(m for m in sys.modules if m.startswith(('taprig.daemon', 'taprig.client')))\n"
        "assert not bad, bad\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert out.returncode == 0, out.stderr
