"""The dashboard under load: simulated browsers on loopback switching views, and hostile uploads.

    .venv/bin/python tests/benchmarks/load_dashboard.py [--users 20] [--seconds 60] [--no-attacks]
    .venv/bin/python tests/benchmarks/load_dashboard.py --url http://127.0.0.1:8050 --store sqlite:///PATH

By default it records the sample campaign in a temporary SQLite store and serves the real app on
a threaded werkzeug server at 127.0.0.1:<free port> in this process (so the clients share its
interpreter). With ``--url`` it loads a dashboard already running on this machine instead, for
example ``cloakrcs serve --store URL`` in another process; ``--store`` names that server's store,
whose folder is watched for files a refused upload must not leave. Only 127.0.0.1 is accepted.

Each user repeatedly loads the page and changes the controls of every view (tests/test_dashboard_load.py
holds the load generator and documents it). While they run, an oversized zip, a zip with paths that
escape its folder and two zip bombs are posted to the upload callback. Prints requests, errors,
p50/p95/p99/max latency per request kind and overall, and the refusal messages; exits 1 on any error.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from test_dashboard_load import (
    BROWSER_CONNECTIONS,
    LOOPBACK,
    MAX_USERS,
    Server,
    make_store,
    run_load,
)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--users", type=int, default=20, help=f"simulated users, 1-{MAX_USERS} (default 20)")
    ap.add_argument("--seconds", type=float, default=60.0, help="duration of the load (default 60)")
    ap.add_argument("--no-attacks", action="store_true", help="skip the hostile uploads")
    ap.add_argument("--url", help=f"a dashboard already running at http://{LOOPBACK}:PORT")
    ap.add_argument("--store", help="with --url: that dashboard's SQLite store URL (sqlite:///PATH)")
    ap.add_argument("--connections", type=int, default=BROWSER_CONNECTIONS,
                    help=f"parallel connections per user, as a browser opens (default {BROWSER_CONNECTIONS})")
    ap.add_argument("--seed", type=int, default=0, help="seed of the users' choices (default 0)")
    ap.add_argument("--json", metavar="FILE", help="also write the figures as JSON")
    args = ap.parse_args(argv)
    if not 1 <= args.users <= MAX_USERS:
        ap.error(f"--users must be 1-{MAX_USERS}")
    if not 1 <= args.connections <= 8:
        ap.error("--connections must be 1-8")
    if not 0 < args.seconds <= 3600:
        ap.error("--seconds must be in (0, 3600]")

    if args.url:
        if not args.url.startswith(f"http://{LOOPBACK}:"):
            ap.error(f"--url must be http://{LOOPBACK}:PORT (loopback only)")
        if not (args.store or "").startswith("sqlite:///"):
            ap.error("--url needs --store sqlite:///PATH, the store of that dashboard")
        from cloakrcs.dashboard.data import upload_root_for

        folder = Path(args.store[len("sqlite:///"):]).expanduser().resolve().parent
        report = run_load(args.url.rstrip("/"), folder, upload_root_for(args.store), args.users, args.seconds,
                          attacks=not args.no_attacks, seed=args.seed, connections=args.connections)
    else:
        with tempfile.TemporaryDirectory(prefix="cloakrcs-load-") as tmp:
            print("recording the sample campaign in a temporary store…", file=sys.stderr)
            url = make_store(Path(tmp))
            with Server(url) as srv:
                print(f"serving on {srv.url}; {args.users} users for {args.seconds:g} s", file=sys.stderr)
                report = run_load(srv.url, Path(tmp), srv.app.views.source.upload_root, args.users, args.seconds,
                                  attacks=not args.no_attacks, seed=args.seed, connections=args.connections)
    print(report.summary())
    if args.json:
        Path(args.json).write_text(json.dumps({
            "users": report.users, "seconds": report.seconds, "wall_s": report.wall_s, "requests": report.n_requests,
            "errors": report.stats.errors, "latency": report.stats.table(),
            "refusals": [vars(r) for r in report.refusals], "written": report.written,
            "after_ok": report.after_ok}, indent=2))
    bad = (report.stats.errors or report.written or not report.after_ok or report.stuck_users
           or any(not r.ok for r in report.refusals))
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
