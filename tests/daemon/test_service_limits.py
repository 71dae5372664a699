"""The service's limits on what a request may carry: numbers of any size, grids of any size.

Integers are unbounded in JSON (RFC 8259 §6 leaves the range to the implementation) and
Python's json module reads them exactly, so ``10**400`` arrives as an int that no float can
hold; it must get a 400 naming the field, not a 500. A grid has at most 4,096 points whether
it arrives as a list or as CSV text, and a grid that large is parsed, stored, listed and
encoded without holding the event loop (the autouse loop guard, tests/loopguard.py, fails
any test during which a callback held the loop over 100 ms).
"""

from __future__ import annotations

from typing import Any

from taprig.daemon.api.service import Service
from taprig.daemon.auth import Auth
from taprig.daemon.grid import MAX_POINTS
from taprig.daemon.lifespan import RunningRig

from .test_service import Api, auth, run, running, serving

__all__ = ["auth", "running"]  # fixtures, used by name

HUGE = "1" + "0" * 400  # 10**400 as JSON text


def _grid_json(n: int) -> list[dict[str, Any]]:
    return [{"label": f"P{i}", "x": i * 1e-3, "y": 0.0, "z": 0.0} for i in range(n)]


def _grid_csv(n: int) -> str:
    return "label,x,y,z\n" + "".join(f"P{i},{i * 1e-3:.3f},0,0\n" for i in range(n))


async def _post_text(api: Api, path: str, text: str) -> tuple[int, Any]:
    headers = {**api.headers(), "Content-Type": "application/json"}
    async with api.http.post(path, data=text, headers=headers) as resp:
        return resp.status, await resp.json()


def test_huge_numbers_get_400_naming_the_field(running: RunningRig, auth: Auth) -> None:
    grid = '[{"label": "A1", "x": 0, "y": 0, "z": 0}]'
    cases = {
        f'{{"name": "n", "grid": {grid}, "averages": {HUGE}}}': "body.averages",
        f'{{"name": "n", "grid": {grid}, "averages": -{HUGE}}}': "body.averages",
        f'{{"name": "n", "grid": {grid}, "averages": 1e400}}': "body.averages",
        f'{{"name": "n", "grid": [{{"label": "A1", "x": {HUGE}, "y": 0, "z": 0}}]}}':
            "body.grid[0].x",
        f'{{"name": "n", "grid": {grid}, "request_id": {HUGE}}}': "body.request_id",
        f'{{"request_id": "huge-number-01", "test": {HUGE}}}': "body.test",
    }  # fmt: skip

    async def main() -> None:
        async with serving(running, auth) as (_, api):
            for text, field in cases.items():
                path = "/v1/session/select" if '"test"' in text else "/v1/tests"
                status, body = await _post_text(api, path, text)
                assert status == 400, (text[:60], body)
                assert field in body["message"], body
                assert len(body["message"]) < 300  # the number is not echoed whole
            for query in (f"since={HUGE}", f"since=-{HUGE}", f"wait={HUGE}"):
                status, _ = await api.get(f"/v1/changes?{query}")
                assert status == 400, query
            status, _ = await api.get(f"/v1/points/{HUGE}")
            assert status == 400

    run(main())


def test_grids_are_capped_however_they_arrive(running: RunningRig, auth: Auth) -> None:
    """4,097 points as a list or as CSV: 400; 60,000 compact CSV rows (600 kB): 400."""
    big_csv = "label,x,y,z\n" + "".join(f"{i},0,0,0\n" for i in range(60_000))

    async def main() -> None:
        async with serving(running, auth, max_body=1 << 20) as (_, api):
            status, body = await api.post("/v1/tests", {"name": "j", "grid": _grid_json(4097)})
            assert status == 400 and "4097 items" in body["message"], body
            status, body = await api.post("/v1/tests", {"name": "c", "grid_csv": _grid_csv(4097)})
            assert status == 400 and f"at most {MAX_POINTS}" in body["message"], body
            status, body = await api.post("/v1/tests", {"name": "c", "grid_csv": big_csv})
            assert status == 400 and "60000 points" in body["message"], body
            status, _ = await api.get("/v1/tests/c")
            assert status == 404  # nothing stored

    run(main())


def test_largest_grids_keep_the_loop_free(running: RunningRig, auth: Auth) -> None:
    """Two 4,096-point tests (CSV and list) made, listed and read while the loop guard
    watches; every answer carries the whole grid."""

    async def main() -> None:
        async with serving(running, auth, max_body=1 << 20) as (service, api):
            assert isinstance(service, Service)
            made = {"name": "big-csv", "grid_csv": _grid_csv(MAX_POINTS)}
            status, body = await api.post("/v1/tests", made)
            assert status == 201, body
            made = {"name": "big-list", "grid": _grid_json(MAX_POINTS)}
            status, body = await api.post("/v1/tests", made)
            assert status == 201, body
            status, body = await api.get("/v1/tests")
            assert status == 200
            sizes = {t["name"]: len(t["grid"]) for t in body["tests"]}
            assert sizes["big-csv"] == sizes["big-list"] == MAX_POINTS
            status, body = await api.get("/v1/tests/big-list")
            assert status == 200 and len(body["grid"]) == MAX_POINTS

    run(main())
