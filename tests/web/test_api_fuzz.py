"""Schemathesis against the app's own OpenAPI schema on a live loopback server: no 5xx, errors are JSON.

Schemathesis (https://schemathesis.readthedocs.io) generates requests from
``/api/openapi.json``; each operation gets a bounded number of examples. Two
passes: ids as generated (mostly unknown ones), and ids replaced by a real
dataset and a finished analysis so the handlers behind the 404 are reached too
(deletes are left out of that pass so the ids stay valid). The contract
(docs/contracts.md) says errors are ``{"detail": ...}`` with a 4xx status.
"""

from __future__ import annotations

import time

import httpx
import numpy as np
import pytest
import schemathesis
from hypothesis import HealthCheck, Phase, settings

from live_server import LiveServer

EXAMPLES = 30
_FUZZ_SETTINGS = settings(max_examples=EXAMPLES, deadline=None, derandomize=True, database=None,
                          suppress_health_check=list(HealthCheck), phases=[Phase.explicit, Phase.generate])


@pytest.fixture(scope="module")
def live(tmp_path_factory):
    root = tmp_path_factory.mktemp("fuzz")
    srv = LiveServer(root / "data", args=("--max-upload-mb", "1"))
    rng = np.random.default_rng(12)
    data = rng.normal(size=(60, 3))
    text = "a,b,c\n" + "\n".join(",".join(f"{v:.4f}" for v in row) for row in data)
    try:
        with httpx.Client(base_url=srv.base, timeout=30) as c:
            ds = c.post("/api/datasets", files={"file": ("fuzz.csv", text.encode(), "text/csv")}).json()
            aid = c.post(f"/api/datasets/{ds['id']}/analyses", json={"measures": ["pearson", "spearman"]}).json()["id"]
            deadline = time.monotonic() + 60
            while c.get(f"/api/analyses/{aid}").json()["status"] in ("queued", "running"):
                assert time.monotonic() < deadline
                time.sleep(0.2)
        srv.ids = {"dataset_id": ds["id"], "analysis_id": aid}
        yield srv
    finally:
        srv.stop()


@pytest.fixture(scope="module")
def api_schema(live):
    return schemathesis.openapi.from_url(live.url("/api/openapi.json"), timeout=30)


schema = schemathesis.pytest.from_fixture("api_schema")


SEEN: dict[tuple[str, str, int], int] = {}


def _check(response, case) -> None:
    key = (case.method, case.path, response.status_code)
    SEEN[key] = SEEN.get(key, 0) + 1
    where = f"{case.method} {case.formatted_path} {case.query or ''} -> {response.status_code}"
    assert response.status_code < 500, f"{where}: {response.text[:300]}"
    if 400 <= response.status_code < 500 and case.path.startswith("/api/"):
        body = response.json()
        assert isinstance(body, dict) and isinstance(body.get("detail"), str) and body["detail"], where


@schema.parametrize()
@_FUZZ_SETTINGS
def test_no_server_errors_with_generated_ids(case, live):
    response = case.call(base_url=live.base, timeout=60)
    _check(response, case)


@schema.exclude(method="DELETE").parametrize()
@_FUZZ_SETTINGS
def test_no_server_errors_with_real_ids(case, live):
    for name, value in live.ids.items():
        if case.path_parameters and name in case.path_parameters:
            case.path_parameters[name] = value
    if case.query and "x" in case.query:
        # A real x, and half the time a real y, so the pair view itself runs.
        case.query["x"] = "a"
        if len(str(case.query.get("y", ""))) % 2 == 0:
            case.query["y"] = "b"
    response = case.call(base_url=live.base, timeout=60)
    _check(response, case)


def test_server_still_answers_after_fuzzing(live):
    # Runs after the fuzz tests in file order: the server survived them and its data is intact.
    for (method, path, status), count in sorted(SEEN.items()):
        print(f"{method:6} {path:45} {status}: {count}")
    assert sum(SEEN.values()) >= 10 * EXAMPLES  # the fuzz tests really sent requests
    with httpx.Client(base_url=live.base, timeout=30) as c:
        assert c.get("/api/datasets").status_code == 200
        r = c.get(f"/api/analyses/{live.ids['analysis_id']}/pairs")
        assert r.status_code in (200, 404)  # 404 only if a generated DELETE hit the real id by chance


# ---------------------------------------------------------------------------
# The analysis options, fuzzed by value type (the schema says only "object")
# ---------------------------------------------------------------------------

from hypothesis import given  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

OPTION_NAMES = ("measures", "columns", "groups", "missing", "adjust", "confidence", "permutations", "seed")
_scalars = (st.none() | st.booleans() | st.integers(min_value=-(2**70), max_value=2**70)
            | st.floats(allow_nan=True, allow_infinity=True) | st.text(max_size=12)
            | st.sampled_from(["pearson", "dcor", "a", "b", "bh", "complete", "g=a,b"]))
_values = st.recursive(_scalars, lambda inner: st.lists(inner, max_size=4)
                       | st.dictionaries(st.text(max_size=6), inner, max_size=3), max_leaves=8)


def _post_options(live, body: str) -> httpx.Response:
    return httpx.post(live.url(f"/api/datasets/{live.ids['dataset_id']}/analyses"), content=body.encode(),
                      headers={"content-type": "application/json"}, timeout=60)


@settings(max_examples=80, deadline=None, derandomize=True, database=None,
          suppress_health_check=list(HealthCheck))
@given(options=st.dictionaries(st.sampled_from(OPTION_NAMES) | st.text(max_size=8), _values, max_size=5))
def test_analysis_options_of_any_type_never_give_a_server_error(live, options):
    import json

    # allow_nan: NaN, Infinity and -Infinity as a careless client (or JavaScript) would send them
    r = _post_options(live, json.dumps(options, allow_nan=True))
    assert r.status_code < 500, f"{options!r} -> {r.status_code}: {r.text[:300]}"
    body = r.json()
    if r.status_code == 202:  # a valid request: stop the analysis it started
        httpx.post(live.url(f"/api/analyses/{body['id']}/cancel"), timeout=60)
    else:
        assert r.status_code == 422 and isinstance(body.get("detail"), str) and body["detail"], (options, body)


@pytest.mark.parametrize("body, field", [
    ('{"measures": [1]}', "measures"), ('{"measures": [null]}', "measures"), ('{"columns": [1, 2]}', "columns"),
    ('{"missing": 5}', "missing"), ('{"adjust": 5}', "adjust"), ('{"adjust": ["bh"]}', "adjust"),
    ('{"permutations": Infinity}', "permutations"), ('{"seed": -Infinity}', "seed"), ('{"seed": 1e400}', "seed"),
    ('{"permutations": 2.7}', "permutations"), ('{"permutations": true}', "permutations"),
    ('{"seed": true}', "seed"), ('{"confidence": NaN}', "confidence"), ('{"confidence": "0.9"}', "confidence"),
    ('{"groups": 5}', "groups"), ('{"groups": {"g": [1]}}', "groups"),
])
def test_bad_option_types_get_a_422_naming_the_field(live, body, field):
    # the values the issue found giving a 500 or being coerced (2.7 -> 2, true -> 1)
    r = _post_options(live, body)
    assert r.status_code == 422, r.text
    assert r.json()["detail"].startswith(field), r.json()
