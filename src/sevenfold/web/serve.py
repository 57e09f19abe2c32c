"""``sevenfold view``: serve the web view with uvicorn until Ctrl-C.

The socket is bound here (a busy port is a one-line error; ``--port 0`` picks a free one)
and the address printed with the start's random token, before the server runs.
"""

from __future__ import annotations

import ipaddress
import secrets
import socket
import sys

from ..errors import QueueError
from ..queue.home import home_root

LOOPBACK_HINT = "ssh -N -L {port}:127.0.0.1:{port} USER@THIS-HOST, then open the link on the laptop"


def is_loopback(host: str) -> bool:
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def bind(host: str, port: int) -> socket.socket:
    """A listening socket on (host, port), or QueueError saying why not."""
    try:
        infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM, flags=socket.AI_PASSIVE)
    except socket.gaierror as exc:
        raise QueueError(f"--host {host!r}: {exc.strerror}") from None
    family, _, _, _, address = infos[0]
    sock = socket.socket(family, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    try:
        sock.bind(address)
    except OSError as exc:
        sock.close()
        raise QueueError(f"cannot listen on {host}:{port}: {exc.strerror or exc}; "
                         "choose another --port (0 picks a free one)") from None
    sock.listen(2048)
    sock.set_inheritable(True)
    return sock


def serve(home: str | None, host: str, port: int) -> int:
    import uvicorn

    from .app import create_app

    root = home_root(home)
    token = secrets.token_urlsafe(24)
    # on 127.0.0.1 only names of this machine may be asked for (an SSH tunnel keeps them)
    hosts = ["127.0.0.1", "localhost"] if host in ("127.0.0.1", "localhost") else None
    app = create_app(root, token, hosts)
    sock = bind(host, port)
    from .. import export, store  # noqa: F401  (zarr and pydantic: imported now, not on the first page)
    bound_port = sock.getsockname()[1]
    shown = f"[{host}]" if ":" in host else host
    if not root.is_dir():
        print(f"warning: there is no queue home at {root} yet; the page says so until one appears",
              file=sys.stderr)
    if not is_loopback(host):
        print(f"warning: listening on {host}, not only on this machine: anyone who can reach port "
              f"{bound_port} can read the queue (actions still need the token). An SSH tunnel to "
              "127.0.0.1 is safer.", file=sys.stderr)
    print(f"sevenfold view of the queue in {root}", flush=True)
    print(f"  read-only:             http://{shown}:{bound_port}/", flush=True)
    print(f"  with cancel and retry: http://{shown}:{bound_port}/?token={token}", flush=True)
    if is_loopback(host):
        print(f"  from a laptop: {LOOPBACK_HINT.format(port=bound_port)}", flush=True)
    print("Ctrl-C stops the view (the queue and its workers go on)", flush=True)
    config = uvicorn.Config(app, log_level="warning", access_log=False, timeout_graceful_shutdown=2)
    server = uvicorn.Server(config)
    server.run(sockets=[sock])
    return 0
