"""The database drops away and comes back: 503 problem details meanwhile, recovery without a restart."""

import socket
import threading
from urllib.parse import urlsplit, urlunsplit

from abate import db
from abate.domain.tokens import create_token
from conftest import authorised_client, build_app, close_pool, make_study


class Forwarder:
    """A TCP forwarder on loopback to the database server that the test can cut and restore."""

    def __init__(self, target_host, target_port):
        self.target = (target_host, target_port)
        probe = socket.socket()
        probe.bind(("127.0.0.1", 0))
        self.port = probe.getsockname()[1]
        probe.close()
        self.connections = []
        self.listener = None

    def start(self):
        self.listener = socket.socket()
        self.listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self.listener.bind(("127.0.0.1", self.port))
        self.listener.listen()
        threading.Thread(target=self._accept, args=(self.listener,), daemon=True).start()

    def _accept(self, listener):
        while True:
            try:
                client, _ = listener.accept()
            except OSError:
                return
            server = socket.create_connection(self.target)
            self.connections += [client, server]
            for source, sink in ((client, server), (server, client)):
                threading.Thread(target=self._pipe, args=(source, sink), daemon=True).start()

    @staticmethod
    def _pipe(source, sink):
        try:
            while data := source.recv(65536):
                sink.sendall(data)
        except OSError:
            pass
        finally:
            for end in (source, sink):
                try:
                    end.shutdown(socket.SHUT_RDWR)
                except OSError:
                    pass
                end.close()

    def cut(self):
        """Refuse new connections and break the open ones, as a failed database server would."""
        # shutdown wakes the thread blocked in accept(); close alone would leave it accepting on Linux.
        try:
            self.listener.shutdown(socket.SHUT_RDWR)
        except OSError:
            pass
        self.listener.close()
        for connection in self.connections:
            try:
                connection.shutdown(socket.SHUT_RDWR)
                connection.close()
            except OSError:
                pass
        self.connections = []


def test_requests_get_503_while_the_database_is_away_and_succeed_once_it_is_back(postgres_schema_url, tmp_path):
    parts = urlsplit(postgres_schema_url)
    forwarder = Forwarder(parts.hostname, parts.port or 5432)
    forwarder.start()
    url = urlunsplit(parts._replace(netloc=f"{parts.username}@127.0.0.1:{forwarder.port}"))
    app = build_app(url, tmp_path, DB_POOL_TIMEOUT=1)
    try:
        with db.database.connection_context():
            secret = create_token("outage test", "admin")[1]
        client = authorised_client(app, secret)
        study = make_study(client)
        forwarder.cut()
        away = client.get(f"/v1/studies/{study['id']}")
        # RFC 9457 problem details with 503 and a Retry-After (RFC 9110 section 10.2.3)
        assert away.status_code == 503 and away.headers["Content-Type"] == "application/problem+json"
        assert away.headers["Retry-After"] and away.get_json()["status"] == 503
        assert client.get("/readyz").status_code == 503
        forwarder.start()
        # The same app, no restart: the first request after the outage may still meet a broken pooled
        # connection, so allow the pool one discard before it must answer.
        answers = [client.get("/readyz").status_code for _ in range(3)]
        assert answers[-1] == 200
        back = client.get(f"/v1/studies/{study['id']}")
        assert back.status_code == 200 and back.get_json()["title"] == study["title"]
    finally:
        forwarder.cut()
        close_pool()
