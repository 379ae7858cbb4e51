"""Run the service under gunicorn from Python, with embedded defaults (no configuration file).

The workers are :class:`BufferingWorker`: each reads whole requests on an event loop (any number
of slow clients cost a buffer each, not a worker), then runs the application on one complete
request at a time in its main thread, as a sync worker does (no threads sharing the GIL with the
numpy work).  It also answers the server's own errors (bad request line, URI too long, headers
too large, request timeout) as RFC 9457 problem details, and on TERM stops accepting at once.
"""

from __future__ import annotations

import errno
import gc
import importlib
import json
import logging
import os
import selectors
import socket
import sys
import time
from collections import deque

from gunicorn import arbiter, http
from gunicorn.app.base import BaseApplication
from gunicorn.http import errors as http_errors
from gunicorn.http.errors import ChunkMissingTerminator, InvalidChunkSize, LimitRequestLine, UnsupportedTransferCoding
from gunicorn.workers.sync import SyncWorker

from .core.problems import Problem

DEFAULTS = {
    "bind": "127.0.0.1:8000",
    "workers": max(2, os.cpu_count() or 1),
    # whole requests are read on an event loop, then run one at a time per process (CPU-bound numpy)
    "worker_class": "calcservice.server.BufferingWorker",
    "worker_connections": 1000,      # connections one worker holds (reading, queued or writing) before it stops accepting
    "timeout": 60,                   # last line of defence: a worker stuck this long is killed and replaced
    "graceful_timeout": 30,          # on HUP/TERM, in-flight requests get this long to finish
    "keepalive": 5,
    "max_requests": 10000,           # recycle workers now and then (memory fragmentation)
    "max_requests_jitter": 1000,
    "limit_request_line": 8190,
    "limit_request_fields": 100,
    "control_socket_disable": True,  # no gunicorn control socket in $HOME: nothing uses it, and instances on one machine would share its path
    "sendfile": False,               # answers are written from memory by the event loop, never from a file descriptor
    "preload_app": True,             # import numpy/astropy once in the master; workers fork ready
    "accesslog": None,               # the app logs each request itself, with its request id and no body
    "errorlog": "-",
    "loglevel": "info",
}

READ_SIZE = 65536
#: what a worker's first table, date or figure request would import (astropy's table I/O and time, YAML for
#: ECSV, pyarrow, matplotlib): about 0.9 s, imported once in the master instead of in each worker on its
#: first such request, and shared by the forked workers
PRELOADED = ("astropy.table", "astropy.io.ascii", "astropy.io.ascii.ecsv", "astropy.time", "yaml", "pyarrow.ipc",
             "pyarrow.compute", "matplotlib.figure", "matplotlib.backends.backend_svg", "matplotlib.backends.backend_agg")
LINGER_SECONDS = 2.0                 # after an answer, unread request bytes are drained this long before closing
CONTINUE = b"HTTP/1.1 100 Continue\r\n\r\n"


#: what a request the worker refuses before the application sees it has wrong, by gunicorn's error: the
#: request line, a header (named where gunicorn names it), or the body's framing
_LINE_ERRORS = (http_errors.InvalidRequestLine, http_errors.InvalidRequestMethod, http_errors.InvalidHTTPVersion,
                http_errors.LimitRequestLine, http_errors.InvalidProxyLine, http_errors.ForbiddenProxyRequest)
_BODY_ERRORS = (http_errors.InvalidChunkSize, http_errors.ChunkMissingTerminator, http_errors.InvalidChunkExtension,
                http_errors.NoMoreData)


def _field_of(exc: Exception) -> str:
    """The field a malformed request's problem names: ``_request_line``, ``_body``, the header gunicorn
    found at fault (``Content-Length``), or ``_headers``."""
    if isinstance(exc, _LINE_ERRORS):
        return "_request_line"
    if isinstance(exc, _BODY_ERRORS):
        return "_body"
    header = getattr(exc, "hdr", None)
    return header.title() if isinstance(header, str) and header else "_headers"


def problem_bytes(problem: Problem) -> bytes:
    """A whole HTTP/1.1 answer carrying an RFC 9457 problem document; the connection then closes."""
    doc = problem.as_dict()
    body = json.dumps(doc).encode()
    head = (f"HTTP/1.1 {problem.status} {problem.title}\r\nConnection: close\r\nContent-Type: application/problem+json\r\n"
            f"Content-Length: {len(body)}\r\nX-Content-Type-Options: nosniff\r\n\r\n")
    return head.encode("latin-1") + body


class _Output:
    """Stands for the client socket while the application runs: what is written is kept, in order,
    and sent by the event loop, so that a client that reads slowly holds no worker."""

    def __init__(self, continued: bool = False):
        self.chunks: list[bytes] = []
        self.continued = continued          # a 100 Continue already went out while the body was read

    def sendall(self, data) -> None:
        if data:
            self.chunks.append(bytes(data))

    def send(self, data) -> int:
        if not (self.continued and bytes(data) == CONTINUE):
            self.sendall(data)
        return len(data)

    def gettimeout(self) -> float:
        return 0.0

    def setblocking(self, flag) -> None:
        pass

    def shutdown(self, how) -> None:
        # an answer that failed after its head was written: the loop sends what there is, then closes
        raise OSError(errno.ENOTCONN, "the event loop closes the connection")

    def close(self) -> None:
        pass


class _Address:
    """The listener's address, kept at accept time: the listener itself is closed during a drain."""

    def __init__(self, name):
        self.name = name

    def getsockname(self):
        return self.name


class _Conn:
    READING, QUEUED, WRITING, LINGERING, CLOSED = range(5)

    def __init__(self, sock: socket.socket, addr, server, deadline: float):
        self.sock = sock
        self.addr = addr
        self.server = _Address(server)
        self.buf = bytearray()
        self.state = _Conn.READING
        self.deadline = deadline
        self.head_end = -1             # index just past the blank line that ends the head
        self.scanned = 0               # how far the head has been searched for its end
        self.length = None             # the body's length once known (Content-Length)
        self.chunked = False
        self.chunk_pos = 0             # where the next chunk-size line starts, in a chunked body
        self.events = 0                # what the selector watches for on this socket (0: not registered)
        self.expects_continue = False
        self.continued = False
        self.out: deque[memoryview] = deque()


class BufferingWorker(SyncWorker):
    """A gunicorn worker that buffers each whole request before the application sees it.

    One selector loop per process accepts connections, reads their heads within
    ``header_timeout_seconds`` and their bodies within ``body_timeout_seconds`` (408 beyond), refuses
    a head over ``max_header_bytes`` (431) and writes answers without blocking.  Complete requests are
    parsed by gunicorn's own parser and run through the application in the main thread, one at a
    time: the numpy work never shares the GIL, and a worker busy computing does not accept, so
    new connections go to an idle worker as with sync workers.  The connection closes after each
    answer (a proxy in front keeps its clients' connections open).
    """

    def init_process(self):
        self.selector = selectors.DefaultSelector()
        self.conns: dict[int, _Conn] = {}
        self.queued: deque[_Conn] = deque()
        self.draining = False
        self.listeners_open = False
        super().init_process()

    def load_wsgi(self):
        super().load_wsgi()
        app = self.wsgi
        settings = getattr(app, "config", {}).get("CALCSERVICE_SETTINGS")
        if settings is None:
            from .config import load_settings
            settings = load_settings()
        self.limits = settings.limits

        def wsgi(environ, start_response):
            # the readiness endpoint answers 503 once the worker is draining
            environ["calcservice.draining"] = self.draining
            return app(environ, start_response)

        self.wsgi = wsgi

    # ------------------------------------------------------------------ signals

    def handle_exit(self, sig, frame):
        # TERM: stop accepting at once, so that new connections are refused instead of waiting in
        # the backlog; what was accepted is still answered within the graceful timeout
        self.alive = False
        self.draining = True
        self.close_listeners()

    def close_listeners(self):
        if not self.listeners_open:
            return
        self.listeners_open = False
        for s in self.sockets:
            try:
                self.selector.unregister(s)
            except (KeyError, ValueError):
                pass
            s.close()

    # ------------------------------------------------------------------ the loop

    def run(self):
        self.addresses = {}
        for s in self.sockets:
            s.setblocking(False)
            self.addresses[s] = s.getsockname()
            if s.family in (socket.AF_INET, socket.AF_INET6) and hasattr(socket, "TCP_DEFER_ACCEPT"):
                # a connection is handed over once its first bytes are in: the worker that accepts it
                # usually has the whole request at once and computes it, so the next connection goes
                # to another worker, as with sync workers (and a connection that never sends costs nothing)
                s.setsockopt(socket.IPPROTO_TCP, socket.TCP_DEFER_ACCEPT, self.limits.header_timeout_seconds)
            self.selector.register(s, selectors.EVENT_READ, None)
        self.listeners_open = True
        self.accepting = True
        self.selector.register(self.PIPE[0], selectors.EVENT_READ, "wakeup")
        stop_at = None
        self.next_sweep = 0.0
        while True:
            self.notify()
            if not self.alive:
                self.close_listeners()
                if not self.conns or not self.is_parent_alive():
                    break
                if stop_at is None:
                    stop_at = time.monotonic() + self.cfg.graceful_timeout
                elif time.monotonic() > stop_at:
                    break
            elif not self.is_parent_alive():
                break
            self.throttle_accept()
            timeout = 0.0 if self.queued else self.next_timeout()
            for key, mask in self.selector.select(timeout):
                if key.data is None:
                    if self.alive:
                        self.accept(key.fileobj)
                elif key.data == "wakeup":
                    try:
                        os.read(self.PIPE[0], 512)
                    except OSError:
                        pass
                else:
                    self.on_event(key.data, mask)
            if time.monotonic() >= self.next_sweep:
                self.expire()
            if self.queued:
                self.serve(self.queued.popleft())
                if not self.queued and self.alive and self.accepting:
                    # as a sync worker does: take a waiting connection straight away, without a
                    # turn through the selector (which would wake every idle worker for it too)
                    for listener in self.sockets:
                        self.accept(listener)
        for conn in list(self.conns.values()):
            self.close(conn)
        self.selector.close()

    def throttle_accept(self):
        # a worker holding worker_connections connections leaves new ones to the others (or the backlog)
        want = self.alive and self.listeners_open and len(self.conns) < self.cfg.worker_connections
        if want != self.accepting and self.listeners_open:
            for s in self.sockets:
                if want:
                    self.selector.register(s, selectors.EVENT_READ, None)
                else:
                    self.selector.unregister(s)
            self.accepting = want

    def next_timeout(self) -> float:
        if not self.conns:
            return 1.0
        soonest = min(c.deadline for c in self.conns.values())
        return max(0.0, min(1.0, soonest - time.monotonic()))

    def accept(self, listener):
        # one connection per turn of the loop: a worker that then gets a whole request computes
        # it, and the next connection goes to whichever worker is idle
        try:
            sock, addr = listener.accept()
        except OSError as e:
            if e.errno in (errno.EINVAL, errno.EBADF):
                self.close_listeners()     # the master shut the listening socket down: stopping
                return
            if e.errno in (errno.EAGAIN, errno.EWOULDBLOCK, errno.ECONNABORTED):
                return
            raise
        sock.setblocking(False)
        conn = _Conn(sock, addr, self.addresses.get(listener, ("", 0)),
                     time.monotonic() + self.limits.header_timeout_seconds)
        self.conns[sock.fileno()] = conn
        self.read(conn)                 # the request is often whole already: then it never needs the selector
        if conn.state == _Conn.READING:
            self.watch(conn, selectors.EVENT_READ)

    def watch(self, conn: _Conn, events: int):
        if events == conn.events:
            return
        if not conn.events:
            self.selector.register(conn.sock, events, conn)
        elif not events:
            self.selector.unregister(conn.sock)
        else:
            self.selector.modify(conn.sock, events, conn)
        conn.events = events

    def on_event(self, conn: _Conn, mask: int):
        if conn.state == _Conn.WRITING and mask & selectors.EVENT_WRITE:
            self.flush(conn)
        elif conn.state == _Conn.LINGERING:
            self.linger(conn)
        elif conn.state == _Conn.READING:
            self.read(conn)

    def read(self, conn: _Conn):
        try:
            data = conn.sock.recv(READ_SIZE)
        except (BlockingIOError, InterruptedError):
            return
        except OSError:
            self.close(conn)
            return
        if not data:
            self.close(conn)            # the client went away before its request was whole
            return
        conn.buf += data
        self.frame(conn)

    def frame(self, conn: _Conn):
        """Decide whether the buffered bytes hold a whole request; queue it when they do."""
        limits = self.limits
        if conn.head_end < 0:
            end = conn.buf.find(b"\r\n\r\n", max(0, conn.scanned - 3))
            if end < 0:
                conn.scanned = len(conn.buf)
                line_limit = self.cfg.limit_request_line
                if 0 < line_limit < len(conn.buf) and conn.buf.find(b"\r\n", 0, line_limit + 2) < 0:
                    self.refuse_before_app(conn, LimitRequestLine(len(conn.buf), line_limit))
                elif len(conn.buf) > limits.max_header_bytes:
                    self.refuse_head(conn)
                return
            conn.head_end = end + 4
            if conn.head_end > limits.max_header_bytes:
                self.refuse_head(conn)
                return
            if not self.read_framing(conn):
                self.queue(conn)        # gunicorn's parser says what is wrong with this head
                return
            if conn.length is not None and conn.length > limits.max_body_bytes:
                self.queue(conn)        # the application refuses it (413) from its Content-Length alone
                return
            conn.deadline = time.monotonic() + limits.body_timeout_seconds
            conn.chunk_pos = conn.head_end
        try:
            complete = self.body_complete(conn)
        except (InvalidChunkSize, ChunkMissingTerminator) as e:
            self.refuse_before_app(conn, e)
            return
        if complete:
            self.queue(conn)
            return
        if conn.expects_continue and not conn.continued:
            # the client waits for this before it sends its body
            conn.continued = True
            try:
                conn.sock.send(CONTINUE)
            except OSError:
                pass
        if conn.chunked and len(conn.buf) - conn.head_end > limits.max_body_bytes + READ_SIZE:
            self.refuse(conn, problem_bytes(Problem(
                413, f"the request body is over the limit of {limits.max_body_bytes} bytes",
                limit={"name": "max_body_bytes", "value": limits.max_body_bytes})))
            return

    def read_framing(self, conn: _Conn) -> bool:
        """Content-Length or chunked, from the head; False when the head is not clear about it."""
        lengths, codings = [], []
        for line in bytes(conn.buf[:conn.head_end]).split(b"\r\n")[1:]:
            name, sep, value = line.partition(b":")
            name = name.strip().lower()
            if name == b"content-length":
                lengths.append(value.strip())
            elif name == b"transfer-encoding":
                codings.append(value.strip().lower())
            elif name == b"expect":
                conn.expects_continue = value.strip().lower() == b"100-continue"
        if codings:
            if lengths or not codings[-1].endswith(b"chunked"):
                return False
            conn.chunked = True
            return True
        if len(lengths) > 1 or (lengths and not lengths[0].isdigit()):
            return False
        conn.length = int(lengths[0]) if lengths else 0
        return True

    def body_complete(self, conn: _Conn) -> bool:
        """Whether the whole body is buffered; a malformed chunked body raises gunicorn's error."""
        if not conn.chunked:
            return len(conn.buf) - conn.head_end >= conn.length
        buf = conn.buf
        while True:
            eol = buf.find(b"\r\n", conn.chunk_pos)
            if eol < 0:
                if len(buf) - conn.chunk_pos > 1024:      # no chunk-size line is this long
                    raise InvalidChunkSize(bytes(buf[conn.chunk_pos:conn.chunk_pos + 32]))
                return False
            size_text = bytes(buf[conn.chunk_pos:eol]).split(b";", 1)[0].strip()
            if not size_text or size_text.strip(b"0123456789abcdefABCDEF"):
                raise InvalidChunkSize(size_text)
            size = int(size_text, 16)
            if size == 0:
                # the last chunk, then trailer lines up to an empty one
                if buf.startswith(b"\r\n", eol + 2):
                    return True
                return buf.find(b"\r\n\r\n", eol + 2) >= 0
            end = eol + 2 + size
            if len(buf) < end + 2:
                return False
            if buf[end:end + 2] != b"\r\n":
                raise ChunkMissingTerminator(bytes(buf[end:end + 2]))
            conn.chunk_pos = end + 2

    def queue(self, conn: _Conn):
        conn.state = _Conn.QUEUED
        self.watch(conn, 0)
        self.queued.append(conn)

    def expire(self):
        now = time.monotonic()
        self.next_sweep = now + 0.05
        for conn in [c for c in self.conns.values() if c.deadline <= now and c.state != _Conn.QUEUED]:
            if conn.state == _Conn.READING and conn.buf:
                what = "headers" if conn.head_end < 0 else "body"
                seconds = (self.limits.header_timeout_seconds if conn.head_end < 0
                           else self.limits.body_timeout_seconds)
                self.log.warning("Request timeout from ip=%s: %s not complete within %d s",
                                 conn.addr[0] if conn.addr else "", what, seconds)
                detail = f"the request {what} did not arrive within {seconds} s"
                self.refuse(conn, problem_bytes(Problem(
                    408, detail, {"_headers" if conn.head_end < 0 else "_body": [detail]},
                    limit={"name": f"{'header' if conn.head_end < 0 else 'body'}_timeout_seconds", "value": seconds})))
            else:
                self.close(conn)        # idle, or an answer not taken in time

    # ------------------------------------------------------------------ answering

    def serve(self, conn: _Conn):
        out = _Output(conn.continued)
        req = None
        try:
            parser = http.get_parser(self.cfg, [bytes(conn.buf)], conn.addr)
            req = next(parser)
            self.handle_request(conn.server, req, out, conn.addr)
        except (StopIteration, http.errors.NoMoreData):
            pass
        except Exception as e:
            out.chunks.clear()
            self.handle_error(req, out, conn.addr, e)
        conn.buf = bytearray()
        self.write(conn, out.chunks)

    def handle_error(self, req, client, addr, exc):
        """gunicorn picks the status and logs the error; the answer is a problem document instead
        of its HTML page."""
        page = _Output()
        super().handle_error(req, page, addr, exc)
        status_line = b"".join(page.chunks).split(b"\r\n", 1)[0].decode("latin-1")
        _, status, reason = (status_line.split(" ", 2) + ["", ""])[:3]
        status = int(status) if status.isdigit() else 500
        if isinstance(exc, UnsupportedTransferCoding):
            # gunicorn's 501 (RFC 9112 sec. 6.1 says SHOULD): the caller's coding to change, a 4xx naming the header
            detail = (f"Transfer-Encoding {str(exc.hdr)[:60]!r} is not taken: send the body with Content-Length or "
                      "chunked, and a compressed one with Content-Encoding: gzip")
            client.sendall(problem_bytes(Problem(400, detail, {"Transfer-Encoding": [detail]})))
            return
        if isinstance(exc, LimitRequestLine) and exc.max_size:
            detail = f"the request line is over the limit of {exc.max_size} bytes"
        elif status < 500:
            detail = str(exc) or reason
        else:
            client.sendall(problem_bytes(Problem(status, "the server failed on this request; it has been logged")))
            return
        client.sendall(problem_bytes(Problem(status, detail, {_field_of(exc): [detail]})))

    def refuse_before_app(self, conn: _Conn, exc: Exception):
        out = _Output()
        self.handle_error(None, out, conn.addr, exc)
        self.refuse(conn, b"".join(out.chunks))

    def refuse_head(self, conn: _Conn):
        limit = self.limits.max_header_bytes
        # the limit is named as in a 413 problem, so that a client can tell which one it met
        detail = f"the request line and headers are over the limit of {limit} bytes"
        self.refuse(conn, problem_bytes(Problem(431, detail, {"_headers": [detail]},
                                                limit={"name": "max_header_bytes", "value": limit})))

    def refuse(self, conn: _Conn, answer: bytes):
        if conn.state == _Conn.QUEUED:
            return
        self.watch(conn, 0)
        conn.buf = bytearray()
        self.write(conn, [answer])

    def write(self, conn: _Conn, chunks):
        if len(chunks) > 1 and sum(map(len, chunks)) <= READ_SIZE:
            chunks = [b"".join(chunks)]     # head and body of a small answer in one segment
        conn.out = deque(memoryview(c) for c in chunks if c)
        conn.state = _Conn.WRITING
        conn.deadline = time.monotonic() + self.timeout
        if not self.flush(conn) and conn.state == _Conn.WRITING:
            self.watch(conn, selectors.EVENT_WRITE)

    def flush(self, conn: _Conn) -> bool:
        """Send what the socket takes now; True once everything is sent."""
        try:
            while conn.out:
                sent = conn.sock.send(conn.out[0])
                if sent:
                    # a client taking its answer has the worker timeout between two sends, however large the answer
                    conn.deadline = time.monotonic() + self.timeout
                if sent < len(conn.out[0]):
                    conn.out[0] = conn.out[0][sent:]
                    return False
                conn.out.popleft()
        except (BlockingIOError, InterruptedError):
            return False
        except OSError:
            self.close(conn)
            return True
        self.finish(conn)
        return True

    def finish(self, conn: _Conn):
        # half-close, then wait for the client to close (draining anything it still sends): closing
        # first would reset a connection with unread bytes under its answer (RFC 9112 section 9.6),
        # and would leave this side holding the TIME_WAIT of every connection
        try:
            conn.sock.shutdown(socket.SHUT_WR)
        except OSError:
            self.close(conn)
            return
        conn.state = _Conn.LINGERING
        conn.deadline = time.monotonic() + LINGER_SECONDS
        self.watch(conn, selectors.EVENT_READ)

    def linger(self, conn: _Conn):
        try:
            if conn.sock.recv(READ_SIZE):
                return
        except (BlockingIOError, InterruptedError):
            return
        except OSError:
            pass
        self.close(conn)

    def close(self, conn: _Conn):
        fd = conn.sock.fileno()
        if fd >= 0:
            self.watch(conn, 0)
            self.conns.pop(fd, None)
        if conn.state == _Conn.QUEUED and conn in self.queued:
            self.queued.remove(conn)
        conn.state = _Conn.CLOSED
        conn.sock.close()


class Arbiter(arbiter.Arbiter):
    """gunicorn's master, which on TERM shuts its listening sockets down before the workers hear of it."""

    def stop(self, graceful=True):
        # Closing a listening socket in the master leaves it open in every worker that inherited it,
        # and connections kept arriving in its backlog until the last worker had finished its
        # request.  shutdown() acts on the socket itself: new connections are refused at once, and
        # the workers' accept() fails.  Not when another master shares the socket (a re-executed
        # master, systemd, reuse_port), the condition under which gunicorn itself unlinks it.
        if self.reexec_pid == self.master_pid == 0 and not self.systemd and not self.cfg.reuse_port:
            for listener in self.LISTENERS:
                try:
                    listener.sock.shutdown(socket.SHUT_RDWR)
                except OSError:
                    pass
        super().stop(graceful)


class Server(BaseApplication):
    def __init__(self, options: dict, config: dict | None = None):
        self.options = {**DEFAULTS, **{k: v for k, v in options.items() if v is not None}}
        self.app_config = config
        super().__init__()

    def load_config(self):
        for key, value in self.options.items():
            if key in self.cfg.settings:
                self.cfg.set(key, value)

    def load(self):
        from . import create_app
        logging.basicConfig(level=logging.INFO, format="%(asctime)s %(process)d %(name)s %(message)s")
        app = create_app(self.app_config)
        for name in PRELOADED:
            importlib.import_module(name)
        # the app and all it imported (numpy, scipy, astropy: ~10^5 objects) live as long as the
        # process: frozen, the collector's full passes no longer walk them again and again (a
        # catalogue request allocates enough to trigger several), and the forked workers share
        # their pages instead of copying them as the collector touches them
        gc.freeze()
        return app

    def run(self):
        try:
            Arbiter(self).run()
        except RuntimeError as e:
            print(f"\nError: {e}\n", file=sys.stderr)
            sys.exit(1)


def serve(host: str = "127.0.0.1", port: int = 8000, workers: int | None = None, timeout: int | None = None,
          **extra) -> None:
    Server({"bind": f"{host}:{port}", "workers": workers, "timeout": timeout, **extra}).run()
