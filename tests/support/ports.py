"""TCP ports on 127.0.0.1 for the processes a test starts, and for refused connections."""

import socket


def free_port() -> int:
    """A TCP port on 127.0.0.1 that nothing listens on right now: bound, then released, so a
    server a test starts can take it, and connecting to it meanwhile is refused at once."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])
