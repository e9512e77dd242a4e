"""Who may talk to the server and what input it survives: Host, Origin, token, body limits, hostile names.

A real ``pairlens serve`` on a free 127.0.0.1 port answers the network-level
checks; the token checks drive the app that ``pairlens.web.server.serve`` builds for
a wildcard bind in-process (no socket beyond loopback is ever opened). The
expected behaviours are common practice for local web tools: the Host check
against DNS rebinding and the Origin check against cross-site request forgery
follow the OWASP CSRF Prevention Cheat Sheet ("verifying origin with standard
headers"); status 421 is "Misdirected Request" (RFC 9110, section 15.5.20). Section names
and numbers are from memory.
"""

from __future__ import annotations

import csv
import functools
import hashlib
import html
import io
import json
import re
import socket
import time

import httpx
import numpy as np
import pytest
from fastapi.testclient import TestClient

from live_server import READ_SECONDS, LiveServer, free_port, wait_for_analysis

HOSTILE = ["<script>window.__pwned=1</script>", "<img src=x onerror=window.__pwned=1>",
           "</script><script>window.__pwned=2</script>", "\"'><svg onload=window.__pwned=3>",
           "=HYPERLINK(\"http://example.invalid\")", "plain"]
HOSTILE_FILE = "<script>alert(1)</script>.csv"


def _csv(columns, n=50, seed=3) -> bytes:
    rng = np.random.default_rng(seed)
    data = rng.normal(size=(n, len(columns)))
    data[:, 1] += data[:, 0]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(columns)
    for row in data:
        w.writerow([f"{v:.5f}" for v in row])
    return buf.getvalue().encode()


_wait = functools.partial(wait_for_analysis, timeout=90.0)


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    root = tmp_path_factory.mktemp("hardening")
    srv = LiveServer(root / "data", args=("--max-upload-mb", "1"))
    try:
        yield srv
    finally:
        srv.stop()


@pytest.fixture(scope="module")
def client(server):
    with httpx.Client(base_url=server.base, timeout=READ_SECONDS) as c:
        yield c


# Host header (DNS rebinding) ------------------------------------------------------

@pytest.mark.parametrize("host", ["evil.example", "evil.example:{port}", "127.0.0.1.evil.example:{port}",
                                  "localhost.evil.example", "", "[::1", "a:b:c"])
def test_foreign_host_is_refused(server, client, host):
    r = client.get("/api/datasets", headers={"host": host.format(port=server.port)})
    assert r.status_code == 421
    assert "Host" in r.json()["detail"]
    page = client.get("/", headers={"host": host.format(port=server.port)})
    assert page.status_code == 421 and "text/html" in page.headers["content-type"]


@pytest.mark.parametrize("host", ["127.0.0.1:{port}", "localhost:{port}", "LOCALHOST:{port}", "[::1]:{port}",
                                  "127.0.0.1"])
def test_own_names_are_served(server, client, host):
    r = client.get("/api/datasets", headers={"host": host.format(port=server.port)})
    assert r.status_code == 200, r.text


def test_foreign_host_cannot_write(server, client, tmp_path):
    before = len(client.get("/api/datasets").json())
    r = client.post("/api/datasets", files={"file": ("a.csv", _csv(["a", "b"]), "text/csv")},
                    headers={"host": "rebound.example"})
    assert r.status_code == 421
    assert len(client.get("/api/datasets").json()) == before


# Origin of state-changing requests (CSRF) ---------------------------------------

@pytest.mark.parametrize("headers", [
    {"origin": "http://evil.example"},
    {"origin": "null"},
    {"origin": "http://127.0.0.1:1"},              # same host, other port: another origin
    {"origin": "https://127.0.0.1:{port}"},        # other scheme: another origin
    {"referer": "http://evil.example/page.html"},
    {"sec-fetch-site": "cross-site"},
])
def test_cross_site_writes_are_403(server, client, headers):
    headers = {k: v.format(port=server.port) for k, v in headers.items()}
    before = len(client.get("/api/datasets").json())
    r = client.post("/api/datasets", files={"file": ("x.csv", _csv(["a", "b"]), "text/csv")}, headers=headers)
    assert r.status_code == 403, r.text
    assert "cross-site" in r.json()["detail"]
    form = client.post("/demo", headers=headers, follow_redirects=False)
    assert form.status_code == 403
    assert len(client.get("/api/datasets").json()) == before


@pytest.mark.parametrize("headers", [
    {},                                                 # curl, scripts: no Origin at all
    {"origin": "http://127.0.0.1:{port}"},
    {"origin": "http://localhost:{port}", "host": "localhost:{port}"},
    {"referer": "http://127.0.0.1:{port}/datasets/x"},
    {"sec-fetch-site": "same-origin", "origin": "http://127.0.0.1:{port}"},
])
def test_same_origin_and_non_browser_writes_pass(server, client, headers):
    headers = {k: v.format(port=server.port) for k, v in headers.items()}
    r = client.post("/api/datasets", files={"file": ("ok.csv", _csv(["a", "b", "c"]), "text/csv")},
                    headers=headers)
    assert r.status_code == 201, r.text


def test_cross_site_get_is_still_served(server, client):
    # Reading is not a state change; the browser's same-origin policy keeps the answer from the other page.
    r = client.get("/api/datasets", headers={"origin": "http://evil.example"})
    assert r.status_code == 200
    assert "access-control-allow-origin" not in r.headers


def test_security_headers(client):
    r = client.get("/")
    assert r.headers["x-frame-options"] == "DENY"
    assert r.headers["x-content-type-options"] == "nosniff"
    assert r.headers["referrer-policy"] == "same-origin"
    assert "frame-ancestors 'none'" in r.headers["content-security-policy"]


# Limits ---------------------------------------------------------------------------

def test_oversized_upload_is_413_and_the_server_carries_on(server, client):
    big = b"a,b\n" + b"1,2\n" * (800 * 1024)  # 3.2 MB against a 1 MB limit
    r = client.post("/api/datasets", files={"file": ("big.csv", big, "text/csv")})
    assert r.status_code == 413
    assert "1 MB" in r.json()["detail"]
    page = client.post("/upload", files={"file": ("big.csv", big, "text/csv")})
    assert page.status_code == 413 and "upload limit" in page.text
    # Chunked, with no Content-Length: the limit holds while streaming.
    boundary = "hardeningboundary"

    def body():
        yield (f"--{boundary}\r\nContent-Disposition: form-data; name=\"file\"; filename=\"s.csv\"\r\n"
               "Content-Type: text/csv\r\n\r\na,b\n").encode()
        for _ in range(300):
            yield b"1,2\n" * 4096
        yield f"\r\n--{boundary}--\r\n".encode()

    r = client.post("/api/datasets", content=body(),
                    headers={"content-type": f"multipart/form-data; boundary={boundary}"})
    assert r.status_code == 413
    # Still serving, still accepting good uploads, nothing half-written left behind.
    assert client.get("/api/datasets").status_code == 200
    ok = client.post("/api/datasets", files={"file": ("small.csv", _csv(["a", "b"]), "text/csv")})
    assert ok.status_code == 201
    assert not [p for p in (server.data_dir / "blobs").iterdir() if p.name.startswith(".upload-")]


def test_declared_oversize_is_refused_before_the_body(server):
    # Declare 50 MB, send only the headers: the answer must come without the body being read.
    with socket.create_connection(("127.0.0.1", server.port), timeout=10) as s:
        s.sendall((f"POST /api/datasets HTTP/1.1\r\nHost: 127.0.0.1:{server.port}\r\n"
                   "Content-Type: multipart/form-data; boundary=x\r\n"
                   f"Content-Length: {50 * 1024 * 1024}\r\n\r\n").encode())
        reply = s.recv(4096).decode("latin-1")
    assert reply.startswith("HTTP/1.1 413")


def test_large_json_settings_body_is_413(server, client):
    ds = client.post("/api/datasets", files={"file": ("j.csv", _csv(["a", "b"]), "text/csv")}).json()
    huge = {"measures": ["pearson"], "columns": ["a"] * 300_000}  # about 1.5 MB of JSON
    r = client.post(f"/api/datasets/{ds['id']}/analyses", json=huge)
    assert r.status_code == 413
    assert "KB" in r.json()["detail"]
    assert client.get("/api/datasets").status_code == 200


def test_too_many_columns_is_a_clear_422(server, client, monkeypatch):
    from pairlens import config

    wide = ",".join(f"c{i}" for i in range(config.MAX_COLUMNS + 1)).encode() + b"\n" + \
        ",".join("1" for _ in range(config.MAX_COLUMNS + 1)).encode() + b"\n"
    r = client.post("/api/datasets", files={"file": ("wide.csv", wide, "text/csv")})
    assert r.status_code == 422
    assert str(config.MAX_COLUMNS) in r.json()["detail"]


# Client file names never become paths ---------------------------------------------

@pytest.mark.parametrize("name", ["../../escape.csv", "/etc/passwd.csv", "..\\..\\win.csv", HOSTILE_FILE])
def test_client_file_names_never_become_paths(server, client, name):
    content = _csv(["a", "b"], seed=len(name))
    r = client.post("/api/datasets", files={"file": (name, content, "text/csv")})
    assert r.status_code == 201, r.text
    body = r.json()
    assert "/" not in body["name"] and not body["name"].startswith("..")
    stored = sorted(p.name for p in server.data_dir.rglob("*") if p.is_file())
    # hashlib gives the reference digest the blob must be named by.
    assert hashlib.sha256(content).hexdigest() in stored
    assert not (server.data_dir.parent / "escape.csv").exists()
    assert not any("escape" in s or "passwd" in s or "win.csv" in s or "script" in s for s in stored)


# Hostile column and file names are inert ------------------------------------------

def _assert_inert(text: str, where: str) -> None:
    for payload in ("<script>window.__pwned", "<img src=x", "<svg onload", "</script><script>",
                    "<script>alert(1)"):
        assert payload not in text, f"{where}: raw payload {payload!r}"


def test_hostile_names_are_inert_everywhere(server, client):
    r = client.post("/api/datasets", files={"file": (HOSTILE_FILE, _csv(HOSTILE), "text/csv")})
    assert r.status_code == 201, r.text
    ds = r.json()
    names = ds["numeric_columns"]
    assert set(names) >= {HOSTILE[0], HOSTILE[2]}  # kept verbatim as data
    a = client.post(f"/api/datasets/{ds['id']}/analyses", json={"measures": ["pearson", "dcor"]})
    assert a.status_code == 202, a.text
    aid = a.json()["id"]
    assert _wait(client, aid)["status"] == "done"
    pages = {
        "home": client.get("/"),
        "dataset": client.get(f"/datasets/{ds['id']}"),
        "analysis": client.get(f"/analyses/{aid}"),
        "pair": client.get(f"/analyses/{aid}/pair", params={"x": names[0], "y": names[2]}),
        "missing-pair": client.get(f"/analyses/{aid}/pair", params={"x": names[0], "y": "<script>x</script>"}),
        "missing-dataset": client.get("/datasets/%3Cscript%3Ealert(1)%3C%2Fscript%3E"),
        "report": client.get(f"/api/analyses/{aid}/report.html"),
    }
    for where, resp in pages.items():
        _assert_inert(resp.text, where)
    assert {k: v.status_code for k, v in pages.items()} == {
        "home": 200, "dataset": 200, "analysis": 200, "pair": 200, "missing-pair": 404, "missing-dataset": 404,
        "report": 200}
    assert html.escape(HOSTILE[0], quote=False) in pages["dataset"].text
    assert pages["missing-dataset"].status_code == 404
    # Every <script> block holding data: no raw '<' inside, and it parses back to the real names.
    for where in ("analysis", "pair", "report"):
        for blob in re.findall(r'<script type="application/json"[^>]*>(.*?)</script>', pages[where].text, re.S):
            assert "<" not in blob, where
            json.loads(blob)
    # API answers are JSON, never sniffed as HTML.
    for path in (f"/api/datasets/{ds['id']}", f"/api/analyses/{aid}/pairs"):
        resp = client.get(path)
        assert resp.headers["content-type"].startswith("application/json")
        assert resp.headers["x-content-type-options"] == "nosniff"
    pairs = client.get(f"/api/analyses/{aid}/pairs").json()
    assert {r["x"] for r in pairs} | {r["y"] for r in pairs} == set(names)


def test_csv_export_neutralises_formula_cells():
    # OWASP "CSV Injection": cells starting with = + - @ are prefixed so a spreadsheet shows them as text.
    from pairlens.export import pairs_to_csv

    record = {"x": "=HYPERLINK(\"http://example.invalid\")", "y": "@SUM(A1)", "measure": "pearson",
              "estimate": -0.5, "ci_low": -0.7, "ci_high": -0.2, "p_value": 0.01, "q_value": 0.02, "n": 40,
              "note": "+1"}
    rows = list(csv.DictReader(io.StringIO(pairs_to_csv([record]))))
    assert rows[0]["x"] == "'" + record["x"] and rows[0]["y"] == "'@SUM(A1)" and rows[0]["note"] == "'+1"
    assert float(rows[0]["estimate"]) == -0.5  # numbers stay numbers


# Access token when bound beyond loopback -----------------------------------------

@pytest.fixture
def wildcard_app(monkeypatch, tmp_path, capsys):
    """The app ``serve --host 0.0.0.0`` would run, captured before uvicorn binds anything."""
    import uvicorn

    from pairlens.web import server as server_mod

    captured = {}

    class FakeServer:
        def __init__(self, cfg):
            captured["config"] = cfg
            self.started = True

        def run(self):
            captured["ran"] = True

    monkeypatch.setattr(uvicorn, "Server", FakeServer)
    monkeypatch.setattr(server_mod, "_port_free", lambda host, port: True)  # no bind beyond loopback
    port = free_port()
    assert server_mod.serve(host="0.0.0.0", port=port, data_dir=tmp_path / "data") == 0
    err = capsys.readouterr().err
    link = re.search(r"serving (http://\S+)", err).group(1)
    token = re.search(r"[?&]token=([\w-]+)", link).group(1)
    assert captured["config"].host == "0.0.0.0"
    return captured["config"].app, port, token, err


def test_wildcard_bind_prints_a_token_link(wildcard_app):
    app, port, token, err = wildcard_app
    assert len(token) >= 32  # secrets.token_urlsafe(24): 192 random bits
    assert f":{port}/?token={token}" in err


def test_wildcard_bind_requires_the_token(wildcard_app):
    app, port, token, _ = wildcard_app
    host = {"host": f"127.0.0.1:{port}"}
    with TestClient(app, base_url=f"http://127.0.0.1:{port}") as c:
        r = c.get("/api/datasets", headers=host)
        assert r.status_code == 401 and "token" in r.json()["detail"]
        assert c.get("/", headers=host).status_code == 401
        assert c.get("/api/datasets", headers=host | {"authorization": "Bearer wrong"}).status_code == 401
        assert c.get("/api/datasets", headers=host | {"authorization": f"Bearer {token}x"}).status_code == 401
        up = c.post("/api/datasets", files={"file": ("a.csv", _csv(["a", "b"]), "text/csv")}, headers=host)
        assert up.status_code == 401
        ok = c.get("/api/datasets", headers=host | {"authorization": f"Bearer {token}"})
        assert ok.status_code == 200 and ok.json() == []
        # The link's token becomes an HttpOnly SameSite=Strict cookie and leaves the address bar.
        r = c.get(f"/?token={token}", headers=host, follow_redirects=False)
        assert r.status_code == 303 and r.headers["location"] == "/"
        cookie = r.headers["set-cookie"]
        assert f"pairlens_token_{port}={token}" in cookie and "HttpOnly" in cookie and "SameSite=Strict" in cookie
        assert c.get("/", headers=host).status_code == 200  # the client kept the cookie
        assert c.get("/api/datasets", headers=host).status_code == 200
        # A wrong token in the link is not exchanged; a cookie named for another port does not count.
        c.cookies.clear()
        assert c.get("/api/datasets", headers=host | {"cookie": f"pairlens_token_{port + 1}={token}"}).status_code == 401
        assert c.get("/?token=nope", headers=host, follow_redirects=False).status_code == 401
        # An open redirect through the exchange is not possible.
        r = c.get(f"//evil.example/?token={token}", headers=host, follow_redirects=False)
        assert r.status_code == 303 and not r.headers["location"].startswith("//")


def test_wildcard_bind_still_checks_host(wildcard_app):
    app, port, token, _ = wildcard_app
    auth = {"authorization": f"Bearer {token}"}
    with TestClient(app, base_url=f"http://127.0.0.1:{port}") as c:
        assert c.get("/api/datasets", headers=auth | {"host": "evil.example"}).status_code == 421
        # Other machines reach a wildcard bind by IP address; rebinding needs a DNS name.
        assert c.get("/api/datasets", headers=auth | {"host": f"192.0.2.7:{port}"}).status_code == 200


def test_required_token_over_a_real_socket(tmp_path):
    # --require-token asks for the token on loopback too (other users of the machine reach 127.0.0.1);
    # the same guard as a wildcard bind, here over a real connection.
    srv = LiveServer(tmp_path / "data", args=("--require-token",))
    try:
        link = srv.access_link()
        assert link and link.startswith(f"http://127.0.0.1:{srv.port}/?token=")
        token = link.split("token=", 1)[1]
        with httpx.Client(base_url=srv.base, timeout=READ_SECONDS) as c:
            assert c.get("/api/datasets").status_code == 401
            assert c.get("/").status_code == 401
            assert c.get("/api/datasets", headers={"authorization": "Bearer " + token[:-1]}).status_code == 401
            bearer = {"authorization": f"Bearer {token}"}
            assert c.get("/api/datasets", headers=bearer).status_code == 200
            up = c.post("/api/datasets", files={"file": ("t.csv", _csv(["a", "b"]), "text/csv")}, headers=bearer)
            assert up.status_code == 201
            r = c.get(link.replace(srv.base, ""), follow_redirects=False)
            assert r.status_code == 303 and "HttpOnly" in r.headers["set-cookie"]
            assert c.get("/").status_code == 200 and c.get("/api/datasets").json()[0]["id"] == up.json()["id"]
            # A token does not excuse a cross-site write.
            r = c.post("/demo", headers={"origin": "http://evil.example"}, follow_redirects=False)
            assert r.status_code == 403
    finally:
        srv.stop()


def test_loopback_bind_has_no_token(server):
    assert "token=" not in (server.access_link() or "")
    assert server.access_link() == f"http://127.0.0.1:{server.port}/"


# Deleting ---------------------------------------------------------------------------

def _row_counts(db_path, analysis_ids, dataset_ids) -> dict:
    import sqlite3

    con = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True)
    try:
        q = lambda sql, ids: con.execute(sql.format(",".join("?" * len(ids))), list(ids)).fetchone()[0]
        return {"analyses": q("SELECT COUNT(*) FROM analyses WHERE id IN ({})", analysis_ids),
                "results": q("SELECT COUNT(*) FROM results WHERE analysis_id IN ({})", analysis_ids),
                "datasets": q("SELECT COUNT(*) FROM datasets WHERE id IN ({})", dataset_ids)}
    finally:
        con.close()


def test_delete_removes_rows_and_unshared_bytes(server, client):
    content = _csv(["p", "q", "r"], seed=99)
    sha = hashlib.sha256(content).hexdigest()
    first = client.post("/api/datasets", files={"file": ("one.csv", content, "text/csv")}).json()
    second = client.post("/api/datasets", files={"file": ("same bytes.csv", content, "text/csv")}).json()
    assert first["sha256"] == second["sha256"] == sha
    aid = client.post(f"/api/datasets/{first['id']}/analyses", json={"measures": ["pearson"]}).json()["id"]
    assert _wait(client, aid)["status"] == "done"
    db = server.data_dir / "pairlens.sqlite3"
    assert _row_counts(db, [aid], [first["id"]]) == {"analyses": 1, "results": 1, "datasets": 1}
    # Cross-site deletes are refused like any other write.
    assert client.delete(f"/api/analyses/{aid}", headers={"origin": "http://evil.example"}).status_code == 403
    r = client.delete(f"/api/analyses/{aid}")
    assert r.status_code == 204
    assert client.get(f"/api/analyses/{aid}").status_code == 404
    assert client.get(f"/api/analyses/{aid}/pairs").status_code == 404
    assert client.delete(f"/api/analyses/{aid}").status_code == 404
    assert _row_counts(db, [aid], [first["id"]]) == {"analyses": 0, "results": 0, "datasets": 1}
    blob = server.data_dir / "blobs" / sha
    # The first dataset goes; the bytes stay while the second still uses them.
    assert client.delete(f"/api/datasets/{first['id']}").status_code == 204
    assert client.get(f"/api/datasets/{first['id']}").status_code == 404
    assert blob.exists() and client.get(f"/api/datasets/{second['id']}").status_code == 200
    assert client.delete(f"/api/datasets/{second['id']}").status_code == 204
    assert not blob.exists()
    assert client.delete(f"/api/datasets/{second['id']}").status_code == 404
    assert not [p for p in (server.data_dir / "blobs").iterdir() if p.name.startswith(".deleted-")]
    # The same bytes can be uploaded again afterwards.
    again = client.post("/api/datasets", files={"file": ("one.csv", content, "text/csv")})
    assert again.status_code == 201 and blob.read_bytes() == content


def test_running_analysis_is_not_deleted_under_its_feet(server, client):
    rng = np.random.default_rng(8)
    text = "c0,c1,c2,c3,c4,c5\n" + "\n".join(",".join(f"{v:.5f}" for v in row) for row in rng.normal(size=(3000, 6)))
    ds = client.post("/api/datasets", files={"file": ("slow.csv", text.encode(), "text/csv")}).json()
    aid = client.post(f"/api/datasets/{ds['id']}/analyses", json={"measures": ["dcor"], "permutations": 50000}).json()["id"]
    r = client.delete(f"/api/analyses/{aid}")
    assert r.status_code == 409 and "cancel it first" in r.json()["detail"]
    r = client.delete(f"/api/datasets/{ds['id']}")
    assert r.status_code == 409
    client.post(f"/api/analyses/{aid}/cancel")
    assert _wait(client, aid)["status"] == "cancelled"
    assert client.delete(f"/api/datasets/{ds['id']}").status_code == 204
    assert client.get(f"/api/analyses/{aid}").status_code == 404


def test_delete_forms_need_the_confirm_step(server, client):
    own = {"origin": server.base}
    ds = client.post("/api/datasets", files={"file": ("form.csv", _csv(["a", "b"], seed=5), "text/csv")}).json()
    aid = client.post(f"/api/datasets/{ds['id']}/analyses", json={"measures": ["pearson"]}).json()["id"]
    assert _wait(client, aid)["status"] == "done"
    page = client.get(f"/analyses/{aid}")
    assert 'data-testid="delete-analysis-confirm"' in page.text
    assert 'data-testid="delete-dataset-confirm"' in client.get(f"/datasets/{ds['id']}").text
    r = client.post(f"/analyses/{aid}/delete", data={}, headers=own, follow_redirects=False)
    assert r.status_code == 400 and "confirm" in r.text
    assert client.get(f"/api/analyses/{aid}").status_code == 200
    r = client.post(f"/analyses/{aid}/delete", data={"confirm": "yes"}, headers=own, follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"] == f"/datasets/{ds['id']}"
    assert client.get(f"/api/analyses/{aid}").status_code == 404
    r = client.post(f"/datasets/{ds['id']}/delete", data={"confirm": "yes"},
                    headers={"origin": "http://evil.example"}, follow_redirects=False)
    assert r.status_code == 403
    r = client.post(f"/datasets/{ds['id']}/delete", data={"confirm": "yes"}, headers=own, follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"] == "/"
    assert client.get(f"/api/datasets/{ds['id']}").status_code == 404


def test_rerun_form_and_api(server, client):
    ds = client.post("/api/datasets", files={"file": ("rerun.csv", _csv(["a", "b", "c"], seed=6), "text/csv")}).json()
    settings = {"measures": ["pearson", "kendall"], "adjust": "holm", "seed": 77}
    aid = client.post(f"/api/datasets/{ds['id']}/analyses", json=settings).json()["id"]
    first = _wait(client, aid)
    r = client.post(f"/analyses/{aid}/rerun", headers={"origin": server.base}, follow_redirects=False)
    assert r.status_code == 303
    new_id = r.headers["location"].rsplit("/", 1)[1]
    second = _wait(client, new_id)
    assert second["status"] == "done" and second["settings"] == first["settings"]
    # Same settings and seed, same numbers: the pair tables agree exactly.
    assert client.get(f"/api/analyses/{new_id}/pairs").json() == client.get(f"/api/analyses/{aid}/pairs").json()
    assert client.post("/api/analyses/nope/rerun").status_code == 404


# Row and group limits (in-process, with the limits lowered) -------------------------

@pytest.fixture
def inproc(tmp_path):
    from pairlens.config import ServerSettings
    from pairlens.web.app import create_app

    with TestClient(create_app(ServerSettings(data_dir=tmp_path / "data")), base_url="http://127.0.0.1:8000") as c:
        yield c


def test_too_many_rows_is_a_clear_422(inproc, monkeypatch):
    from pairlens import config

    monkeypatch.setattr(config, "MAX_ROWS", 40)
    r = inproc.post("/api/datasets", files={"file": ("long.csv", _csv(["a", "b"], n=41), "text/csv")})
    assert r.status_code == 422
    assert "40" in r.json()["detail"] and "long.csv" in r.json()["detail"]
    assert inproc.post("/api/datasets", files={"file": ("ok.csv", _csv(["a", "b"], n=40), "text/csv")}).status_code == 201


def test_group_over_the_row_limit_is_refused_before_it_runs(inproc, monkeypatch):
    from pairlens import config

    monkeypatch.setattr(config, "MAX_GROUP_ROWS", 30)
    ds = inproc.post("/api/datasets", files={"file": ("g.csv", _csv(["a", "b", "c"], n=50), "text/csv")}).json()
    r = inproc.post(f"/api/datasets/{ds['id']}/analyses", json={"measures": ["dcor"], "groups": ["ab=a,b"]})
    assert r.status_code == 422, r.text
    assert "30" in r.json()["detail"] and "'ab'" in r.json()["detail"]
    assert inproc.get(f"/api/datasets/{ds['id']}").json()["analyses"] == []  # nothing was queued
    # Without a distance measure, or within the limit, the group is accepted.
    assert inproc.post(f"/api/datasets/{ds['id']}/analyses",
                       json={"measures": ["pearson"], "groups": ["ab=a,b"]}).status_code == 202
    monkeypatch.setattr(config, "MAX_GROUP_ROWS", 50)
    assert inproc.post(f"/api/datasets/{ds['id']}/analyses",
                       json={"measures": ["dcor"], "groups": ["ab=a,b"]}).status_code == 202


def test_queue_runs_at_most_the_configured_number_at_once(server, client):
    from pairlens import config

    rng = np.random.default_rng(10)
    text = "c0,c1,c2,c3,c4,c5\n" + "\n".join(",".join(f"{v:.5f}" for v in row) for row in rng.normal(size=(3000, 6)))
    ds = client.post("/api/datasets", files={"file": ("queue.csv", text.encode(), "text/csv")}).json()
    ids = [client.post(f"/api/datasets/{ds['id']}/analyses",
                       json={"measures": ["dcor"], "permutations": 50000, "seed": s}).json()["id"]
           for s in range(config.MAX_CONCURRENT_ANALYSES + 1)]
    most, saw_queued_while_full = 0, False
    deadline = time.monotonic() + 120  # a hang guard; the loop ends once the state has been seen
    try:
        while time.monotonic() < deadline:
            states = [client.get(f"/api/analyses/{a}").json()["status"] for a in ids]
            running = states.count("running")
            most = max(most, running)
            if running == config.MAX_CONCURRENT_ANALYSES and "queued" in states:
                saw_queued_while_full = True
                if most == running and time.monotonic() > deadline - 117:
                    break
            time.sleep(0.2)
    finally:
        for a in ids:
            client.post(f"/api/analyses/{a}/cancel")
    assert most == config.MAX_CONCURRENT_ANALYSES and saw_queued_while_full
    assert all(_wait(client, a)["status"] == "cancelled" for a in ids)
