"""The dashboard under load: simulated browsers on loopback, and hostile uploads refused meanwhile.

The real app (cloakrcs.dashboard.app.create_app over a SQLite store holding the sample campaign) runs on
a threaded werkzeug server bound to 127.0.0.1. Each simulated user behaves like the Dash renderer
in a browser: it loads the page (GET /, the assets once, /_dash-layout, /_dash-dependencies),
fires the page's initial callbacks in dependency order with values read from the layout, then
changes the controls of each view in turn (a new option of a dropdown or radio, a nudged number)
and fires the callbacks that read them, feeding every response back into its page state.
Meanwhile an oversized zip, a zip whose members escape its folder and two zip bombs are posted
to the upload callback; each must be refused with a one-line message in the upload status.

The load generator lives here; ``tests/benchmarks/load_dashboard.py`` imports it for the longer run.
Duration of the test: ``CLOAKRCS_LOAD_SECONDS`` (default 20 s).
"""

from __future__ import annotations

import base64
import io
import logging
import os
import random
import re
import threading
import time
import zipfile
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Self

import numpy as np
import pytest
import requests  # a dependency of dash itself

ROOT = Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "sample_measurements" / "manifest.toml"
LOOPBACK = "127.0.0.1"
MAX_USERS = 50
REQUEST_TIMEOUT_S = 120.0
JOIN_GRACE_S = 150.0
MAX_CALLS_PER_SETTLE = 100
UPDATE = "/_dash-update-component"
BROWSER_CONNECTIONS = 6  # connections a browser opens per host over HTTP/1.1 (common practice: Chrome, Firefox)


# ---------------------------------------------------------------------------------- the server
def make_store(folder: Path) -> str:
    """A SQLite store in ``folder`` holding the sample campaign, processed once; its URL."""
    from cloakrcs.pipeline import run_process

    url = "sqlite:///" + (Path(folder) / "results.sqlite").as_posix()
    run_process(SAMPLE, Path(folder) / "out", store_url=url, report=False)
    return url


class Server:
    """``create_app(store_url)`` on a threaded werkzeug server at 127.0.0.1:<free port>, in a thread."""

    def __init__(self, store_url: str):
        from werkzeug.serving import make_server

        from cloakrcs.dashboard.app import create_app

        logging.getLogger("werkzeug").setLevel(logging.WARNING)  # no line per request
        self.app = create_app(store_url)
        self._srv = make_server(LOOPBACK, 0, self.app.server, threaded=True)
        self.url = f"http://{LOOPBACK}:{self._srv.server_port}"
        self._thread = threading.Thread(target=self._srv.serve_forever, name="dashboard-load-server", daemon=True)

    def __enter__(self) -> Self:
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self._srv.shutdown()
        self._thread.join(timeout=10)


# ---------------------------------------------------------------------------------- the page model
@dataclass(frozen=True)
class Callback:
    """One entry of /_dash-dependencies, with its outputs split into (id, property) pairs."""

    output: str
    outputs: tuple
    multi: bool
    inputs: tuple
    state: tuple
    initial: bool
    view: str


def page_state(layout) -> tuple[dict, dict]:
    """(value by (id, prop), view by id) of a /_dash-layout tree; a view is its dcc.Tab's value, else 'page'."""
    props, views = {}, {}
    stack = [(layout, "page")]
    while stack:
        node, view = stack.pop()
        if isinstance(node, list):
            stack.extend((n, view) for n in node)
            continue
        if not isinstance(node, dict) or "props" not in node or "type" not in node:
            continue
        p = node["props"]
        if node["type"] == "Tab" and node.get("namespace") == "dash_core_components":
            view = p.get("value", view)
        if isinstance(p.get("id"), str):
            views[p["id"]] = view
            for k, v in p.items():
                props[(p["id"], k)] = v
        stack.extend((v, view) for v in p.values() if isinstance(v, (dict, list)))
    return props, views


def _ref(text: str) -> tuple[str, str]:
    cid, prop = text.split("@")[0].rsplit(".", 1)  # "@hash" marks allow_duplicate outputs
    return cid, prop


def parse_callbacks(deps: list, views: dict) -> list[Callback]:
    """The server-side callbacks of /_dash-dependencies (clientside ones run in the browser: skipped)."""
    out = []
    for d in deps:
        if d.get("clientside_function") or d.get("no_output"):
            continue
        text = d["output"]
        multi = text.startswith("..") and text.endswith("..")
        outputs = tuple(_ref(t) for t in (text[2:-2].split("...") if multi else [text]))
        out.append(Callback(text, outputs, multi, tuple((i["id"], i["property"]) for i in d["inputs"]),
                            tuple((s["id"], s["property"]) for s in d.get("state", [])),
                            not d.get("prevent_initial_call", False), views.get(outputs[0][0], "page")))
    return out


def request_body(cb: Callback, props: dict, changed) -> dict:
    """The JSON the Dash renderer posts to /_dash-update-component for ``cb``."""
    def values(refs):
        return [{"id": i, "property": p, "value": props.get((i, p))} for i, p in refs]

    outs = [{"id": i, "property": p} for i, p in cb.outputs]
    return {"output": cb.output, "outputs": outs if cb.multi else outs[0], "inputs": values(cb.inputs),
            "state": values(cb.state), "changedPropIds": [f"{i}.{p}" for i, p in changed]}


def _option_values(options) -> list:
    return [o["value"] if isinstance(o, dict) else o for o in (options or [])
            if not (isinstance(o, dict) and o.get("disabled"))]


# ---------------------------------------------------------------------------------- the load
@dataclass
class Stats:
    """Every request's kind, latency (s) and outcome; thread-safe."""

    records: list = field(default_factory=list)
    errors: list = field(default_factory=list)
    lock: threading.Lock = field(default_factory=threading.Lock)

    def add(self, kind: str, seconds: float, error: str | None) -> None:
        with self.lock:
            self.records.append((kind, seconds, error is None))
            if error is not None:
                self.errors.append(f"{kind}: {error}")

    def table(self) -> list[dict]:
        """Per kind and overall: count, errors, p50/p95/p99/max latency in ms."""
        with self.lock:
            recs = list(self.records)
        kinds = sorted({k for k, _s, _ok in recs}) + ["overall"]
        rows = []
        for kind in kinds:
            sel = [(s, ok) for k, s, ok in recs if kind in ("overall", k)]
            if not sel:
                continue
            ms = 1e3 * np.array([s for s, _ok in sel])
            p50, p95, p99 = np.percentile(ms, [50, 95, 99])
            rows.append({"kind": kind, "count": len(sel), "errors": sum(not ok for _s, ok in sel),
                         "p50_ms": p50, "p95_ms": p95, "p99_ms": p99, "max_ms": float(ms.max())})
        return rows


class Deadline(Exception):
    """The run's hard deadline passed: the user stops."""


class User:
    """One simulated browser: its own HTTP session and page state."""

    def __init__(self, base: str, stats: Stats, deadline: float, seed: int, parallel: int = BROWSER_CONNECTIONS):
        if not base.startswith(f"http://{LOOPBACK}:"):
            raise ValueError(f"the load generator talks to {LOOPBACK} only, not {base}")
        self.base, self.stats, self.deadline = base, stats, deadline
        self.rng = random.Random(seed)
        self._local = threading.local()
        self._sessions: list = []
        self.pool = ThreadPoolExecutor(parallel, thread_name_prefix="load-conn") if parallel > 1 else None
        self.assets_loaded = False
        self.props: dict = {}
        self.views: dict = {}
        self.callbacks: list[Callback] = []
        self.first_view_done = False  # the deadline applies once the page is loaded and one view exercised

    # ---- HTTP
    @property
    def http(self):
        """This thread's session (one keep-alive connection, as a browser holds per socket)."""
        http = getattr(self._local, "http", None)
        if http is None:
            http = self._local.http = requests.Session()
            http.trust_env = False  # no proxy between us and loopback
            self._sessions.append(http)
        return http

    def close(self) -> None:
        if self.pool is not None:
            self.pool.shutdown(wait=True, cancel_futures=True)
        for http in self._sessions:
            http.close()

    def _send(self, kind: str, method: str, path: str, json_body=None, validate=None):
        """One request, timed and recorded; ``validate(resp) -> (error or None, value)``; the value or None."""
        left = self.deadline - time.monotonic()
        if left <= 0 and self.first_view_done:
            raise Deadline()
        left = max(left, 0.0)
        t0 = time.perf_counter()
        try:
            resp = self.http.request(method, self.base + path, json=json_body,
                                     timeout=min(REQUEST_TIMEOUT_S, left + 60.0))
            _ = resp.content
        except requests.RequestException as exc:  # a refused or dropped connection is an error of the run
            self.stats.add(kind, time.perf_counter() - t0, f"{method} {path}: {type(exc).__name__}: {exc}")
            return None
        elapsed = time.perf_counter() - t0
        # RFC 9110 sec. 15.3.1 and 15.3.5: 200 OK with a body, or 204 No Content (Dash's PreventUpdate)
        if resp.status_code not in (200, 204):
            error, value = f"HTTP {resp.status_code}: {resp.text[:300]!r}", None
        elif validate is not None:
            error, value = validate(resp)
        else:
            error, value = None, resp
        self.stats.add(kind, elapsed, None if error is None else f"{method} {path}: {error}")
        return value

    @staticmethod
    def _json(resp):
        try:
            return None, resp.json()
        except ValueError:
            return "the body is not JSON", None

    # ---- the page
    def load_page(self) -> bool:
        """GET /, the assets (first time only, as a browser caches them), the layout and callbacks; initial calls."""
        resp = self._send("GET /", "GET", "/")
        if resp is None:
            return False
        if not self.assets_loaded:
            for src in re.findall(r'(?:src|href)="(/[^"]+\.(?:js|css)[^"]*)"', resp.text):
                self._send("GET asset", "GET", src)
            self.assets_loaded = True
        layout = self._send("GET /_dash-layout", "GET", "/_dash-layout", validate=self._json)
        deps = self._send("GET /_dash-dependencies", "GET", "/_dash-dependencies", validate=self._json)
        if layout is None or deps is None:
            return False
        self.props, self.views = page_state(layout)
        self.callbacks = parse_callbacks(deps, self.views)
        self.settle({cb: () for cb in self.callbacks if cb.initial})
        return True

    def post(self, cb: Callback, body: dict) -> dict | None:
        """POST one callback; the values its response sets by (id, prop), or None on error."""
        def validate(resp):
            if resp.status_code == 204:
                return None, {}
            error, body = self._json(resp)
            if error:
                return f"{cb.output}: {error}", None
            if not isinstance(body, dict) or not isinstance(body.get("response"), dict):
                return f"{cb.output}: no 'response' in {str(body)[:200]}", None
            values = {(cid, prop): v for cid, vals in body["response"].items() for prop, v in vals.items()}
            extra = set(values) - set(cb.outputs)
            if extra:
                return f"{cb.output}: unexpected outputs {sorted(extra)}", None
            return None, values

        return self._send(f"POST callback {cb.view}", "POST", UPDATE, body, validate)

    def settle(self, pending: dict) -> None:
        """Fire callbacks as the renderer does: one waits while another pending one will set its inputs, the
        ready ones go out together (over up to ``parallel`` connections), and the props a response sets
        trigger the callbacks that read them."""
        calls = 0
        while pending and calls < MAX_CALLS_PER_SETTLE:
            upstream = {o for cb in pending for o in cb.outputs}
            ready = [cb for cb in pending if not (set(cb.inputs) & (upstream - set(cb.outputs)))] or [next(iter(pending))]
            bodies = [(cb, request_body(cb, self.props, pending.pop(cb))) for cb in ready]
            if self.pool is None or len(bodies) == 1:
                results = [self.post(cb, body) for cb, body in bodies]
            else:
                results = [f.result() for f in [self.pool.submit(self.post, cb, body) for cb, body in bodies]]
            calls += len(bodies)
            if time.monotonic() > self.deadline and self.first_view_done:
                raise Deadline()
            for values in results:
                if not values:
                    continue
                self.props.update(values)
                for other in self.callbacks:
                    hit = tuple(k for k in other.inputs if k in values)
                    if hit:
                        pending[other] = tuple(dict.fromkeys(pending.get(other, ()) + hit))

    # ---- the views
    def controls(self, view: str) -> list[tuple[str, str]]:
        """The value inputs of ``view`` a person can change: a choice among options, or a number."""
        out = []
        for cb in self.callbacks:
            if not cb.initial or cb.view != view:
                continue
            for cid, prop in cb.inputs:
                if prop != "value" or self.views.get(cid) != view or (cid, prop) in out:
                    continue
                if self.props.get((cid, "options")) or self.props.get((cid, "type")) == "number":
                    out.append((cid, prop))
        return out

    def new_value(self, cid: str):
        current = self.props.get((cid, "value"))
        options = _option_values(self.props.get((cid, "options")))
        if options:
            if self.props.get((cid, "multi")):
                return self.rng.sample(options, self.rng.randint(1, min(3, len(options))))
            others = [o for o in options if o != current]
            return self.rng.choice(others) if others else None
        if not isinstance(current, (int, float)):
            return None
        step = self.props.get((cid, "step"))
        new = current + step * self.rng.randint(-6, 6) if step else current * self.rng.uniform(0.5, 1.5)
        low = self.props.get((cid, "min"))
        return round(max(new, low) if low is not None else new, 4)

    def change(self, cid: str, prop: str) -> None:
        value = self.new_value(cid)
        if value is None:
            return
        self.props[(cid, prop)] = value
        self.settle({cb: ((cid, prop),) for cb in self.callbacks if (cid, prop) in cb.inputs})

    def run(self, views: list[str]) -> None:
        """Until the deadline: load the page, then in each view change one or two of its controls."""
        try:
            while True:
                if not self.load_page():
                    time.sleep(0.5)
                    continue
                for view in views:
                    ctl = self.controls(view)
                    for cid, prop in self.rng.sample(ctl, min(len(ctl), 2)):
                        self.change(cid, prop)
                    self.first_view_done = True
        except Deadline:
            pass
        finally:
            self.close()


# ---------------------------------------------------------------------------------- hostile uploads
def _zip(members) -> bytes:
    """A zip of (name, size, source, method) members, ``source(n) -> n bytes`` written 1 MiB at a time;
    method None: deflate (level 9)."""
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED, compresslevel=9) as zf:
        for name, size, source, method in members:
            with zf.open(name if method is None else _info(name, method), "w") as out:
                left = size
                while left > 0:
                    n = min(left, 1 << 20)
                    out.write(source(n))
                    left -= n
    return buf.getvalue()


def _info(name: str, method: int) -> zipfile.ZipInfo:
    info = zipfile.ZipInfo(name, date_time=(2026, 1, 1, 0, 0, 0))
    info.compress_type = method
    return info


def hostile_uploads() -> list[tuple[str, str, bytes, str]]:
    """(label, file name, zip bytes, phrase the refusal must contain) of the uploads that must be refused."""
    from cloakrcs.dashboard import upload as U

    zeros = bytes
    manifest = SAMPLE.read_bytes()
    return [
        # a real zip over the compressed-size limit: random bytes stored, so it cannot shrink
        ("oversized", "big.zip", _zip([("campaign/raw/noise.bin", U.MAX_COMPRESSED_BYTES + (1 << 20), os.urandom,
                                        zipfile.ZIP_STORED)]), "larger than"),
        # "Zip Slip" (Snyk security advisory, 2018): member paths with .. that land outside the folder
        ("path escape", "evil.zip", _zip([("campaign/manifest.toml", len(manifest), lambda n: manifest[:n], None),
                                          ("../evil.txt", 4, lambda n: b"evil"[:n], None),
                                          ("campaign/../../../evil.txt", 4, lambda n: b"evil"[:n], None)]),
         "escapes the upload folder"),
        # a zip bomb, one member: 100 MiB of zeros deflates about 1000:1 (zlib), far over the ratio limit
        ("zip bomb (ratio)", "bomb.zip", _zip([("campaign/raw/zeros.s1p", 100 << 20, zeros, None)]),
         "compression ratio"),
        # a zip bomb of many members, each just at the per-member threshold, together over the unpacked limit
        ("zip bomb (total)", "bomb2.zip",
         _zip([(f"campaign/raw/z{i:04d}.s1p", U.CHUNK, zeros, None)
               for i in range(U.MAX_UNCOMPRESSED_BYTES // U.CHUNK + 8)]), "would unpack to"),
    ]


def _files(folder: Path) -> set:
    # the SQLite journal comes and goes with every write; it is not an upload
    return {p for p in folder.rglob("*") if not re.search(r"\.sqlite-(journal|wal|shm)$", p.name)}


def _status_text(children) -> tuple[str, str]:
    """(text, className) of the upload status as the callback set it (an html.Span or a string)."""
    if isinstance(children, dict):
        p = children.get("props", {})
        return str(p.get("children", "")), str(p.get("className", ""))
    return str(children or ""), ""


def post_upload(base: str, props: dict, callbacks: list[Callback], filename: str, data: bytes) -> dict:
    """POST the upload callback as dcc.Upload does; its JSON response (or {'http': status})."""
    cb = next(c for c in callbacks if ("upload", "contents") in c.inputs)
    page = dict(props)
    page[("upload", "contents")] = "data:application/x-zip-compressed;base64," + base64.b64encode(data).decode()
    page[("upload", "filename")] = filename
    with requests.Session() as http:
        http.trust_env = False
        resp = http.post(base + UPDATE, json=request_body(cb, page, [("upload", "contents")]), timeout=REQUEST_TIMEOUT_S)
    if resp.status_code != 200:
        return {"http": resp.status_code}
    return resp.json()


@dataclass
class Refusal:
    label: str
    filename: str
    message: str
    ok: bool
    why: str = ""


def attack(base: str, store_dir: Path, upload_root: Path, uploads: list) -> tuple[list[Refusal], list]:
    """Post every hostile upload; each must be refused in the status line, start no job and write nothing."""
    with requests.Session() as http:
        http.trust_env = False
        layout = http.get(base + "/_dash-layout", timeout=REQUEST_TIMEOUT_S).json()
        deps = http.get(base + "/_dash-dependencies", timeout=REQUEST_TIMEOUT_S).json()
    props, views = page_state(layout)
    callbacks = parse_callbacks(deps, views)
    before = _files(store_dir)
    out = []
    for label, filename, data, phrase in uploads:
        body = post_upload(base, props, callbacks, filename, data)
        resp = body.get("response", {})
        text, cls = _status_text(resp.get("upload-status", {}).get("children"))
        why = []
        if "http" in body:
            why.append(f"HTTP {body['http']}")
        if phrase not in text:
            why.append(f"status does not say {phrase!r}")
        if "\n" in text or not text.startswith(filename + ":"):
            why.append("not one line naming the file")
        if cls != "error":
            why.append("not shown as an error")
        if "upload-job" in resp:
            why.append("a job was started")
        out.append(Refusal(label, filename, text, not why, "; ".join(why)))
    written = sorted(str(p) for p in _files(store_dir) - before)
    written += [str(p) for p in (store_dir.parent / "evil.txt", store_dir / "evil.txt", upload_root / "evil.txt")
                if p.exists()]
    return out, written


# ---------------------------------------------------------------------------------- one run
@dataclass
class LoadReport:
    users: int
    seconds: float
    wall_s: float
    stats: Stats
    refusals: list
    written: list
    after_ok: bool
    stuck_users: int

    @property
    def n_requests(self) -> int:
        return len(self.stats.records)

    def summary(self) -> str:
        lines = [(f"{self.users} users for {self.seconds:g} s ({self.wall_s:.1f} s wall): {self.n_requests} requests, "
                  f"{len(self.stats.errors)} errors, {self.n_requests / max(self.wall_s, 1e-9):.1f} requests/s"),
                 f"{'kind':<28}{'count':>7}{'errors':>7}{'p50 ms':>9}{'p95 ms':>9}{'p99 ms':>9}{'max ms':>9}"]
        for r in self.stats.table():
            lines.append(f"{r['kind']:<28}{r['count']:>7}{r['errors']:>7}{r['p50_ms']:>9.0f}{r['p95_ms']:>9.0f}"
                         f"{r['p99_ms']:>9.0f}{r['max_ms']:>9.0f}")
        lines += [f"  error: {e}" for e in self.stats.errors[:10]]
        for f in self.refusals:
            lines.append(f"upload {f.label:<17} {'refused' if f.ok else 'NOT REFUSED PROPERLY'}: {f.message}"
                         + (f" ({f.why})" if f.why else ""))
        lines.append("written outside the upload folder: " + (", ".join(self.written) or "nothing"))
        lines.append(f"a fresh page load afterwards: {'ok' if self.after_ok else 'FAILED'}")
        if self.stuck_users:
            lines.append(f"{self.stuck_users} users did not stop by the hard deadline")
        return "\n".join(lines)

    def overall(self) -> dict:
        return next(r for r in self.stats.table() if r["kind"] == "overall")


def run_load(base: str, store_dir: Path, upload_root: Path, users: int = 20, seconds: float = 60.0,
             attacks: bool = True, attack_after: float | None = None, seed: int = 0,
             connections: int = BROWSER_CONNECTIONS) -> LoadReport:
    """``users`` simulated browsers for ``seconds`` against the dashboard at ``base`` (loopback only), and the
    hostile uploads while they run. ``store_dir`` is the store's folder (``upload_root`` is inside it):
    no file may appear there, since every one of those uploads must be refused."""
    if not 1 <= users <= MAX_USERS:
        raise ValueError(f"users must be 1-{MAX_USERS}, got {users}")
    if not 0 < seconds <= 3600:
        raise ValueError(f"seconds must be in (0, 3600], got {seconds}")
    from cloakrcs.dashboard.layout import VIEWS

    views = [key for key, _label in VIEWS]
    stats = Stats()
    uploads = hostile_uploads() if attacks else []  # built first: the zips cost CPU time
    t0 = time.monotonic()
    deadline = t0 + seconds
    crowd = [User(base, stats, deadline, seed + i, connections) for i in range(users)]
    # each user starts at a different view, so every view is exercised however slowly the server answers
    threads = [threading.Thread(target=u.run, args=(views[i % len(views):] + views[:i % len(views)],),
                                name=f"load-user-{i}", daemon=True)
               for i, u in enumerate(crowd)]
    for t in threads:
        t.start()
    refusals, written = [], []
    if attacks:
        time.sleep(min(seconds / 3, 10.0) if attack_after is None else attack_after)
        refusals, written = attack(base, Path(store_dir), Path(upload_root), uploads)
    hard_stop = deadline + JOIN_GRACE_S
    for t in threads:
        t.join(timeout=max(0.0, hard_stop - time.monotonic()))
    stuck = sum(t.is_alive() for t in threads)
    wall = time.monotonic() - t0
    after = Stats()
    probe = User(base, after, time.monotonic() + REQUEST_TIMEOUT_S, seed + users)
    probe.assets_loaded = True
    after_ok = probe.load_page() and not after.errors and len(after.records) > 3
    probe.close()
    return LoadReport(users, seconds, wall, stats, refusals, written, after_ok, stuck)


# ---------------------------------------------------------------------------------- the test
@pytest.fixture(scope="module")
def served(tmp_path_factory):
    if not SAMPLE.exists():
        pytest.skip("sample campaign not generated")
    folder = tmp_path_factory.mktemp("load")
    url = make_store(folder)
    with Server(url) as srv:
        yield srv, folder


def test_dashboard_under_load(served, record_property):
    srv, folder = served
    seconds = float(os.environ.get("CLOAKRCS_LOAD_SECONDS", "20"))
    report = run_load(srv.url, folder, srv.app.views.source.upload_root, users=20, seconds=seconds)
    print("\n" + report.summary())
    overall = report.overall()
    for key in ("count", "p50_ms", "p95_ms", "p99_ms", "max_ms"):
        record_property(key, round(float(overall[key]), 1))

    kinds = {r["kind"] for r in report.stats.table()}
    assert {"GET /", "GET /_dash-layout", "GET /_dash-dependencies"} <= kinds
    # every view's callbacks were exercised
    assert {f"POST callback {v}" for v in ("campaign", "gate", "rcs", "reduction", "revisions", "safety")} <= kinds
    assert report.stuck_users == 0
    assert report.stats.errors == [], report.stats.errors[:10]
    assert len(report.refusals) == 4
    for r in report.refusals:
        assert r.ok, f"{r.label}: {r.why}: {r.message!r}"
    assert report.written == []
    assert report.after_ok, "the server stopped serving after the hostile uploads"


def test_page_model_reads_dash_protocol():
    """The payload builder against Dash's own parsing of a callback id (dash._utils.split_callback_id)."""
    from dash._utils import split_callback_id

    deps = [{"output": "..a.b...c.d@123abc..", "inputs": [{"id": "x", "property": "value"}], "state": [],
             "prevent_initial_call": False},
            {"output": "e.figure", "inputs": [{"id": "x", "property": "value"}], "state": [{"id": "y", "property": "data"}],
             "prevent_initial_call": True}]
    layout = {"type": "Div", "namespace": "dash_html_components", "props": {"children": [
        {"type": "Tab", "namespace": "dash_core_components", "props": {"value": "v1", "children": [
            {"type": "Dropdown", "namespace": "dash_core_components", "props": {"id": "x", "value": 3}}]}},
        {"type": "Store", "namespace": "dash_core_components", "props": {"id": "y", "data": [1]}}]}}
    props, views = page_state(layout)
    assert props[("x", "value")] == 3 and views == {"x": "v1", "y": "page"}
    cbs = parse_callbacks(deps, {"a": "v1", "e": "v2"})
    for cb, d in zip(cbs, deps):
        want = split_callback_id(d["output"])  # dash 4.4: a dict, or a list of dicts for multi-output
        want = want if isinstance(want, list) else [want]
        assert [(w["id"], w["property"].split("@")[0]) for w in want] == list(cb.outputs)
    body = request_body(cbs[1], props, [("x", "value")])
    assert body["outputs"] == {"id": "e", "property": "figure"}
    assert body["state"] == [{"id": "y", "property": "data", "value": [1]}]
    assert [cb.initial for cb in cbs] == [True, False] and cbs[0].view == "v1"
