"""Where the dashboard reads from: the results store, or results held in memory (tests, benchmarks).

Both sources give the same small interface; loaded results and campaigns are cached per run id.
"""

from __future__ import annotations

import functools
import threading
import time
from pathlib import Path
from typing import Any


class MemorySource:
    """Results held in memory: ``add(campaign, result) -> run_id``. No notes or parameters persist."""

    def __init__(self, upload_root: str | Path | None = None):
        import tempfile

        self._runs: dict[int, dict[str, Any]] = {}
        self._notes: dict[tuple[str, str], dict[str, Any]] = {}
        self._lock = threading.Lock()
        self.upload_root = Path(upload_root or tempfile.mkdtemp(prefix="cloakrcs-uploads-"))
        self.url = None

    def add(self, campaign, result) -> int:
        with self._lock:
            run_id = max(self._runs, default=0) + 1
            self._runs[run_id] = {"campaign": campaign, "result": result,
                                  "processed_at": time.strftime("%Y-%m-%d %H:%M:%S")}
        return run_id

    record = add

    def runs(self) -> list[dict]:
        return [{"run_id": rid, "campaign": r["result"].campaign, "prototype": r["result"].prototype,
                 "processed_at": r["processed_at"]} for rid, r in sorted(self._runs.items(), reverse=True)]

    def result(self, run_id: int):
        return self._runs[int(run_id)]["result"]

    def campaign(self, run_id: int):
        return self._runs[int(run_id)]["campaign"]

    def history(self, prototype: str | None) -> list[dict]:
        rows = []
        for rid, r in sorted(self._runs.items()):
            res = r["result"]
            if prototype is not None and res.prototype != prototype:
                continue
            for m in res.metrics:
                rows.append({"prototype": res.prototype, "revision": m["revision"], "subject": m["subject"],
                             "polarization": m["polarization"], "campaign": res.campaign, "run_id": rid,
                             "processed_at": r["processed_at"], "band_reduction_db": m["band_reduction_db"],
                             "band_reduction_uncertainty_db": m["band_reduction_uncertainty_db"],
                             "bandwidth_hz": m["bandwidth_hz"],
                             "worst_angle_reduction_db": m["worst_angle_reduction_db"],
                             "check_error_db": m["check_error_db"]})
        return rows

    def revision_info(self, prototype: str | None) -> list[dict]:
        revs = sorted({r["revision"] for r in self.history(prototype)})
        return [{"revision": rev, "note": self._notes.get((prototype, rev), {}).get("note", ""),
                 "parameters": dict(self._notes.get((prototype, rev), {}).get("parameters", {}))} for rev in revs]

    def set_note(self, prototype: str, revision: str, text: str) -> None:
        self._notes.setdefault((prototype, revision), {})["note"] = text

    def set_parameter(self, prototype: str, revision: str, key: str, value) -> None:
        self._notes.setdefault((prototype, revision), {}).setdefault("parameters", {})[key] = value


class StoreSource:
    """The results database (cloakrcs.store), read through a per-run cache."""

    def __init__(self, url: str | None):
        from .. import store

        self.store = store
        self.url = store.resolve_url(url)
        self.upload_root = upload_root_for(self.url)
        self._result = functools.lru_cache(maxsize=8)(lambda rid: store.load_result(self.url, rid)["result"])
        self._campaign = functools.lru_cache(maxsize=2)(self._load_campaign)

    def _run_row(self, run_id: int) -> dict:
        for row in self.store.list_runs(self.url):
            if int(row["run_id"]) == int(run_id):
                return row
        raise KeyError(run_id)

    def _load_campaign(self, run_id: int):
        row = self._run_row(run_id)
        return self.store.load_campaign_from_store(self.url, int(row["campaign_id"]), int(run_id))

    def record(self, campaign, result) -> int:
        return int(self.store.record_run(self.url, campaign, result))

    def runs(self) -> list[dict]:
        rows = []
        for row in self.store.list_runs(self.url):
            rows.append({"run_id": int(row["run_id"]), "campaign": row.get("campaign"),
                         "prototype": row.get("prototype"), "processed_at": str(row.get("processed_at", ""))[:19]})
        return sorted(rows, key=lambda r: r["run_id"], reverse=True)

    def result(self, run_id: int):
        return self._result(int(run_id))

    def campaign(self, run_id: int):
        return self._campaign(int(run_id))

    def history(self, prototype: str | None) -> list[dict]:
        return list(self.store.history(self.url, prototype))

    def revision_info(self, prototype: str | None) -> list[dict]:
        out = []
        for row in self.store.revision_info(self.url, prototype):
            out.append({"revision": row.get("revision"), "note": row.get("note") or row.get("notes") or "",
                        "parameters": dict(row.get("parameters") or {}), "prototype": row.get("prototype")})
        return out

    def set_note(self, prototype: str, revision: str, text: str) -> None:
        self.store.set_revision_note(self.url, prototype, revision, text)

    def set_parameter(self, prototype: str, revision: str, key: str, value) -> None:
        self.store.set_revision_parameter(self.url, prototype, revision, key, value)


def upload_root_for(url: str) -> Path:
    """Uploads live beside a SQLite store (``<db folder>/uploads``), else in ~/.cloakrcs/uploads."""
    if url and url.startswith("sqlite:///") and url != "sqlite:///:memory:":
        return Path(url[len("sqlite:///"):]).expanduser().resolve().parent / "uploads"
    return Path.home() / ".cloakrcs" / "uploads"


def make_source(store_url_or_source):
    """A source from a store URL (None: the default store) or an existing source object."""
    if hasattr(store_url_or_source, "runs"):
        return store_url_or_source
    return StoreSource(store_url_or_source)
