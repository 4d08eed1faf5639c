"""Many campaigns at once (``cloakrcs process-many``): local processes or a Dask cluster.

Each campaign is processed by :func:`process_one` in a worker (its files read serially there: the
parallelism is across campaigns) into ``OUT_ROOT/<campaign name>/``.  Store writes: with a
PostgreSQL URL the workers record their own runs concurrently; with SQLite (one writer) the workers
return the loaded campaign and its result and the parent records them one at a time.
"""

from __future__ import annotations

import glob
import os
import tomllib
from dataclasses import dataclass
from pathlib import Path

from .errors import InputError
from .manifest import MAX_MANIFEST_BYTES, MAX_NAME_CHARS


@dataclass
class CampaignOutcome:
    """One campaign's end: ``error`` is a one-line message, or None on success."""
    manifest: str
    out_dir: str
    name: str
    error: str | None = None
    result: object | None = None     # ProcessingResult
    campaign: object | None = None   # Campaign, only when the parent records the run (SQLite)
    run_id: int | None = None
    staging: str | None = None       # outputs staged by the worker for the parent to publish with the store

    @property
    def ok(self) -> bool:
        return self.error is None


def expand_manifests(patterns) -> list[Path]:
    """Manifest paths from paths and glob patterns, in the order given, duplicates dropped."""
    out: list[Path] = []
    for pat in patterns:
        hits = sorted(glob.glob(os.path.expanduser(pat), recursive=True)) if glob.has_magic(pat) else [pat]
        if not hits:
            raise InputError(f"no manifest matches {pat!r}")
        for h in hits:
            p = Path(h).resolve()
            if p not in out:
                out.append(p)
    return out


def campaign_name(manifest: Path) -> str:
    """[campaign] name of the manifest, or its folder's name when it cannot be read (the worker reports why)."""
    try:
        if manifest.stat().st_size > MAX_MANIFEST_BYTES or not manifest.is_file():
            raise OSError("not a plausible manifest")  # the worker says what is wrong with it
        name = tomllib.loads(manifest.read_text(encoding="utf-8")).get("campaign", {}).get("name")
    except Exception:  # any manifest, however broken, still gets a folder and its FAILED line
        name = None
    return str(name)[:MAX_NAME_CHARS] if isinstance(name, str) and name.strip() else manifest.parent.name


def plan_outputs(manifests: list[Path], out_root) -> list[tuple[Path, Path]]:
    """(manifest, OUT_ROOT/<campaign name>) pairs; names shared by several manifests get -2, -3, ..."""
    root = Path(out_root)
    seen: dict[str, int] = {}
    plan = []
    for m in manifests:
        name = "".join(c if c.isalnum() or c in "-_." else "_" for c in campaign_name(m)) or "campaign"
        seen[name] = seen.get(name, 0) + 1
        plan.append((m, root / (name if seen[name] == 1 else f"{name}-{seen[name]}")))
    return plan


def is_postgres(url: str | None) -> bool:
    return bool(url) and url.startswith("postgresql")


def one_line(exc: BaseException) -> str:
    """A failure of any kind as one line (an InputError is one already)."""
    if isinstance(exc, InputError):
        return str(exc)
    text = " ".join(str(exc).split())[:300]
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


def process_one(manifest, out_dir, settings=None, store_url: str | None = None, report: bool = True,
                return_campaign: bool = False) -> CampaignOutcome:
    """Worker: load (files read serially) and process one campaign into out_dir; never raises.

    The parent holds out_dir's lock. ``store_url`` (PostgreSQL) records the run here;
    ``return_campaign`` ships the campaign back, its outputs staged, for the parent to publish with
    its store write.
    """
    from .campaign import load_campaign
    from .pipeline import run_process

    manifest, out_dir = str(manifest), str(out_dir)
    name = campaign_name(Path(manifest))
    try:
        campaign = load_campaign(manifest, workers=1)
        outcome = run_process(manifest, out_dir, settings, store_url=store_url, report=report, quiet=True,
                              campaign=campaign, lock=False, publish=not return_campaign)
    except Exception as exc:  # one campaign's failure, of any kind, must not stop the others
        return CampaignOutcome(manifest, out_dir, name, error=one_line(exc))
    return CampaignOutcome(manifest, out_dir, outcome.result.campaign, result=outcome.result,
                           campaign=campaign if return_campaign else None, run_id=outcome.run_id,
                           staging=None if outcome.staging is None else str(outcome.staging))


def _record(outcome: CampaignOutcome, url: str) -> CampaignOutcome:
    """Parent side: publish a worker's staged outputs and record its run in the (SQLite) store, as one outcome."""
    from .outputs import OutputFolder
    from .pipeline import publish_run

    folder = OutputFolder(outcome.out_dir, lock=False, staging=Path(outcome.staging)).open()
    try:
        outcome.run_id, _ = publish_run(folder, outcome.result, outcome.campaign, url)
    except Exception as exc:
        outcome.error = f"store: {one_line(exc)}"
    finally:
        folder.close()
    outcome.campaign = None
    return outcome


def process_many(manifests, out_root, settings=None, workers: int | None = None, scheduler: str | None = None,
                 store_url: str | None = None, report: bool = True, on_done=None) -> list[CampaignOutcome]:
    """Process every manifest into OUT_ROOT/<campaign name>/ in parallel; outcomes in manifest order.

    ``scheduler``: a dask.distributed scheduler address (tcp://host:8786) or a Client; otherwise a local
    ProcessPoolExecutor of ``workers`` processes (default: the core count). ``store_url``: None = no
    store, otherwise a resolved URL. ``on_done(outcome)`` is called as each campaign finishes.
    """
    plan = plan_outputs([Path(m) for m in manifests], out_root)
    concurrent = is_postgres(store_url)
    worker_url = store_url if concurrent else None
    ship_back = store_url is not None and not concurrent
    kwargs = dict(settings=settings, store_url=worker_url, report=report, return_campaign=ship_back)
    outcomes: dict[str, CampaignOutcome] = {}

    def finish(outcome: CampaignOutcome) -> None:
        if ship_back and outcome.ok:
            _record(outcome, store_url)
        outcomes[outcome.manifest] = outcome
        if on_done:
            on_done(outcome)

    from .outputs import FolderLock

    locks, runnable = [], []
    for m, o in plan:  # this process holds every output folder's lock until the batch ends
        try:
            locks.append(FolderLock(o).acquire())
            runnable.append((m, o))
        except Exception as exc:
            finish(CampaignOutcome(str(m), str(o), campaign_name(m), error=one_line(exc)))
    try:
        _run_all(runnable, scheduler, workers, kwargs, finish)
    finally:
        for lock in locks:
            lock.release()
    return [outcomes[str(m)] for m, _ in plan]


def _run_all(plan, scheduler, workers, kwargs, finish) -> None:
    """Run process_one over the plan (Dask or local processes), calling finish(outcome) as each ends."""
    if not plan:
        return

    def failed(m, o, exc) -> CampaignOutcome:  # a worker that died (killed, out of memory) or a lost task
        return CampaignOutcome(str(m), str(o), campaign_name(Path(m)), error=f"worker failed: {one_line(exc)}")

    if scheduler is not None:
        from dask.distributed import Client, as_completed

        client = scheduler if isinstance(scheduler, Client) else Client(scheduler)
        try:
            futures = client.map(process_one, [str(m) for m, _ in plan], [str(o) for _, o in plan],
                                 pure=False, **kwargs)
            where = {fut.key: item for fut, item in zip(futures, plan)}
            for fut in as_completed(futures):
                try:
                    finish(fut.result())
                except Exception as exc:
                    finish(failed(*where[fut.key], exc))
                fut.release()
        finally:
            if client is not scheduler:
                client.close()
    else:
        from concurrent.futures import ProcessPoolExecutor, as_completed

        n = min(workers or os.cpu_count() or 1, len(plan)) or 1
        with ProcessPoolExecutor(max_workers=n) as pool:
            futures = {pool.submit(process_one, str(m), str(o), **kwargs): (m, o) for m, o in plan}
            for fut in as_completed(futures):
                try:
                    finish(fut.result())
                except Exception as exc:
                    finish(failed(*futures[fut], exc))
