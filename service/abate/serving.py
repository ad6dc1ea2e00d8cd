"""The API served by waitress in a background thread of this process (demo loading, tests, benchmarks)."""

import contextlib
import threading

from waitress import wasyncore
from waitress.server import create_server


@contextlib.contextmanager
def served_in_thread(app, host="127.0.0.1", port=0, threads=4, **settings):
    """Serve app on host:port (0: a free port) until the block ends; yield its base URL."""
    server = create_server(app, host=host, port=port, threads=threads, **settings)
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    try:
        yield f"http://{host}:{server.effective_port}"
    finally:
        # Workers finish first, then the server's own loop closes its sockets, so that neither a
        # worker nor select() ever touches a closed one.
        server.task_dispatcher.shutdown()
        try:
            server.trigger.pull_trigger(lambda: wasyncore.close_all(server._map))
        except OSError:
            # The loop has already closed its trigger; close whatever is left from here.
            wasyncore.close_all(server._map)
        thread.join(timeout=5)
