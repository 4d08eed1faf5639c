"""`cloakrcs serve [--store URL] [--host 127.0.0.1] [--port 8050]`: the dashboard over a results store."""

from __future__ import annotations

import errno
import sys

from ..errors import InputError

LOOPBACK = "127.0.0.1"


def register(sub) -> None:
    p = sub.add_parser("serve", help="serve the dashboard (binds to loopback unless --host says otherwise)")
    p.add_argument("--store", metavar="URL", help="results store (default: CLOAKRCS_STORE or the per-user SQLite file)")
    p.add_argument("--host", default=LOOPBACK, help=f"address to bind (default {LOOPBACK}: this machine only)")
    p.add_argument("--port", type=int, default=8050, help="port (default 8050)")
    p.set_defaults(func=run)


def check_port_free(host: str, port: int) -> None:
    """InputError (one line) when ``host:port`` cannot be bound, e.g. another program listens there."""
    import socket

    try:
        infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM)
    except OSError as exc:
        raise InputError(f"cannot serve on {host}:{port}: {exc.strerror or exc}") from None
    family, kind, proto, _, address = infos[0]
    with socket.socket(family, kind, proto) as sock:
        sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)  # as the server itself binds
        try:
            sock.bind(address)
        except OSError as exc:
            hint = ": another program uses it; choose another with --port" if exc.errno == errno.EADDRINUSE else ""
            raise InputError(f"cannot serve on {host}:{port}: {exc.strerror or exc}{hint}") from None


def run(args) -> int:
    if not 0 < args.port < 65536:
        raise InputError(f"port must be 1-65535, got {args.port}")
    check_port_free(args.host, args.port)
    from ..dashboard.app import create_app

    app = create_app(args.store)
    url = app.views.source.url
    where = f"http://{args.host}:{args.port}"
    print(f"cloakrcs dashboard on {where} (store {url}); Ctrl+C stops it", file=sys.stderr)
    if args.host not in (LOOPBACK, "localhost", "::1"):
        print(f"cloakrcs: warning: serving on {args.host}: other machines can reach it; there is no login",
              file=sys.stderr)
    try:
        app.run(host=args.host, port=args.port, debug=False)
    except OSError as exc:
        raise InputError(f"cannot serve on {args.host}:{args.port}: {exc.strerror or exc}") from None
    return 0
