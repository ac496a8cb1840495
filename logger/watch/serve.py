"""The lab's screen in web browsers (``railtap watch URL --serve``), through textual-serve.

Each browser that opens the page gets its own ``railtap watch`` process, so its own subscription to the broker:
a viewer only ever reads what benches publish and can never touch a recording.
"""

from __future__ import annotations

import shlex
import sys


def serve(url: str, host: str, port: int) -> int:
    """Serve until Ctrl-C; returns the exit status."""
    from textual_serve.server import Server

    command = shlex.join([sys.executable, "-m", "logger", "watch", url])
    where = f"http://{'[' + host + ']' if ':' in host else host}:{port}/"
    print(f"railtap watch: serving the lab screen for {url} at {where} (Ctrl-C stops)", file=sys.stderr)
    if host not in ("127.0.0.1", "localhost", "::1"):
        print(f"railtap watch: listening on {host}: anyone who can reach this port sees every bench under that "
              "prefix, with no login", file=sys.stderr)
    Server(command, host=host, port=port, title="railtap watch").serve()
    return 0
