"""``pairlens serve``: run the dashboard with uvicorn."""

from __future__ import annotations

import errno
import socket
import sys
from pathlib import Path

from .. import config
from ..config import ServerSettings
from .security import access_link, is_loopback_host, new_token

__all__ = ["serve", "LOOPBACK_HOSTS"]

LOOPBACK_HOSTS = ("127.0.0.1", "localhost", "::1")


def _port_free(host: str, port: int) -> bool:
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    with socket.socket(family, socket.SOCK_STREAM) as s:
        s.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            s.bind((host, port))
        except OSError:
            return False
    return True


def serve(host: str = config.DEFAULT_HOST, port: int = config.DEFAULT_PORT, data_dir: str | Path | None = None,
          demo: bool = False, max_upload_mb: int = config.MAX_UPLOAD_MB, cluster: str | None = None,
          log_level: str = "warning", require_token: bool = False) -> int:
    """Serve until interrupted; returns the process exit code (2 for unusable options)."""
    import uvicorn

    from .app import create_app

    if max_upload_mb <= 0:
        print("pairlens serve: --max-upload-mb must be a positive number of megabytes", file=sys.stderr)
        return 2
    if not (0 < port < 65536):
        print(f"pairlens serve: port {port} is not a TCP port (1-65535)", file=sys.stderr)
        return 2
    if not _port_free(host, port):
        print(f"pairlens serve: cannot listen on {host}:{port} (in use or not allowed); try --port {port + 1}",
              file=sys.stderr)
        return 2
    # Beyond loopback other machines can connect: every request then needs a fresh random token.
    beyond_loopback = not is_loopback_host(host)
    token = new_token() if beyond_loopback or require_token else None
    if beyond_loopback:
        print(f"pairlens serve: listening on {host}, reachable from other machines; requests need the "
              "access token in the link below", file=sys.stderr)
    directory = Path(data_dir) if data_dir else config.default_data_dir()
    settings = ServerSettings(host=host, port=port, data_dir=directory, max_upload_mb=max_upload_mb, demo=demo,
                              cluster=cluster, token=token)
    from ..store import DatabaseDamaged, Store

    try:
        Store(directory, check=True).close()  # a damaged database stops the start, on one line
    except DatabaseDamaged as exc:
        print(f"pairlens serve: {exc}", file=sys.stderr)
        return 2
    app = create_app(settings)
    print(f"pairlens: serving {access_link(host, port, token)}  (data in {directory}; Ctrl+C stops)",
          file=sys.stderr, flush=True)
    server = uvicorn.Server(uvicorn.Config(app, host=host, port=port, log_level=log_level, access_log=False,
                                           lifespan="on", timeout_graceful_shutdown=5))
    try:
        server.run()
    except OSError as exc:
        if exc.errno in (errno.EADDRINUSE, errno.EACCES):
            print(f"pairlens serve: cannot listen on {host}:{port}: {exc.strerror}", file=sys.stderr)
            return 2
        raise
    return 0 if server.started else 1
