"""gunicorn settings for bidstats, read from the environment.

    gunicorn -c gunicorn.conf.py 'service:create_app()'

HOST, PORT                  where to listen (127.0.0.1, 8000)
WORKERS                     worker processes (2 x CPUs + 1, at most 8)
BIDSTATS_WORKER_TIMEOUT     seconds a worker may spend on one request before it is restarted (30; the
                            service's own budget, BIDSTATS_MAX_SECONDS, answers long before)
BIDSTATS_HEAVY_SLOTS        heavy requests this instance runs at once (half the workers, at least 1)
BIDSTATS_READ_TIMEOUT       seconds a client gets to send its whole request (10); past it the connection is closed
BIDSTATS_GRACEFUL_TIMEOUT   seconds a worker gets to finish its request on shutdown or restart (30)
BIDSTATS_KEEPALIVE          seconds an idle keep-alive connection is held (5; the sync workers close every connection)
BIDSTATS_SERVER_ACCESS_LOG  1 (default): gunicorn also writes its own access line to stderr; 0: only the app's JSON line
OPENBLAS_NUM_THREADS        BLAS threads per worker (1; see below)
PROMETHEUS_MULTIPROC_DIR    when set, metrics are shared between workers through files in this directory;
                            it is created if missing and emptied at start-up
"""
import glob
import json
import os
import shutil
import tempfile

import socket
import time

import gunicorn.util
from gunicorn.workers.sync import SyncWorker


def _whole(name, default, minimum=1):
    raw = os.environ.get(name, "")
    if raw == "":
        return default
    try:
        value = int(raw)
    except ValueError:
        raise SystemExit(f"{name} must be a whole number, not {raw!r}") from None
    if value < minimum:
        raise SystemExit(f"{name} must be at least {minimum}")
    return value


def _cpus():
    try:
        return len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        return os.cpu_count() or 1


# The numerics are CPU-bound and every worker holds its own numpy and scipy,
# so more than 8 workers per container buys memory use, not answers.
MAX_DEFAULT_WORKERS = 8

_host = os.environ.get("HOST") or "127.0.0.1"
_port = _whole("PORT", 8000)
bind = [f"[{_host}]:{_port}" if ":" in _host and not _host.startswith("[") else f"{_host}:{_port}"]
workers = _whole("WORKERS", min(2 * _cpus() + 1, MAX_DEFAULT_WORKERS))
# One BLAS thread per worker. Each worker is a single-threaded process already, and
# OpenBLAS would otherwise start a thread per CPU in every worker, threads that wake
# and spin beside the other workers on the same CPUs for matrix products too small to
# gain from them (common practice, no source). Workers inherit this environment; an
# operator's own setting wins.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
timeout = _whole("BIDSTATS_WORKER_TIMEOUT", 30)
# Heavy requests may hold at most this many workers, so that probes and ordinary
# requests always find one (service/web/admission.py); workers inherit the setting.
os.environ.setdefault("BIDSTATS_HEAVY_SLOTS", str(max(1, workers // 2)))
graceful_timeout = _whole("BIDSTATS_GRACEFUL_TIMEOUT", 30)
keepalive = _whole("BIDSTATS_KEEPALIVE", 5)
# No runtime-control socket (gunicorn 25.1+; older versions ignore the name):
# nothing here uses one, and a container user may have no home to put it in.
control_socket_disable = True
# The worker heartbeat file on a RAM disk where there is one: a container's
# overlay file system can stall the heartbeat and get healthy workers killed.
_shm = os.path.isdir("/dev/shm")
if _shm:
    worker_tmp_dir = "/dev/shm"

# ------------------------------------------------------------------ logs
# Everything to stderr. gunicorn's `accesslog = "-"` would write to stdout, and
# reopening /dev/stderr fails for a non-root container user, so the streams are
# given through logging instead. The app's own JSON access line (logger
# bidstats.access) has its own stderr handler and is not configured here.
_server_access_log = _whole("BIDSTATS_SERVER_ACCESS_LOG", 1, minimum=0) != 0
# The method and path only (%(U)s): query strings carry callers' inputs and are never logged.
access_log_format = '%(h)s "%(m)s %(U)s %(H)s" %(s)s %(B)s %(M)sms id=%({x-request-id}o)s'
logconfig_dict = {
    "version": 1,
    "disable_existing_loggers": False,
    "root": {"level": "INFO", "handlers": ["stderr"]},
    "loggers": {
        "gunicorn.error": {"level": "INFO", "handlers": ["stderr"], "propagate": False, "qualname": "gunicorn.error"},
        "gunicorn.access": {
            "level": "INFO" if _server_access_log else "CRITICAL",
            "handlers": ["stderr"] if _server_access_log else [],
            "propagate": False,
            "qualname": "gunicorn.access",
        },
    },
    "handlers": {
        "stderr": {"class": "logging.StreamHandler", "formatter": "generic", "stream": "ext://sys.stderr"},
    },
    "formatters": {
        "generic": {
            "format": "%(asctime)s [%(process)d] [%(levelname)s] %(message)s",
            "datefmt": "[%Y-%m-%d %H:%M:%S %z]",
            "class": "logging.Formatter",
        },
    },
}

# ------------------------------------------------------------------ metrics across workers
_metrics_dir = os.environ.get("PROMETHEUS_MULTIPROC_DIR", "")


def on_starting(server):
    """Before any worker: the heavy slots' lock directory that every worker shares, and
    a fresh metrics directory, so counts from a previous run do not linger."""
    os.environ["BIDSTATS_SLOT_DIR"] = tempfile.mkdtemp(prefix="bidstats-slots-", dir=worker_tmp_dir if _shm else None)
    if _metrics_dir:
        os.makedirs(_metrics_dir, exist_ok=True)
        for path in glob.glob(os.path.join(_metrics_dir, "*.db")):
            os.remove(path)


def child_exit(server, worker):
    """A worker has gone: drop its live-gauge files (its counters stay in the sums)."""
    if _metrics_dir:
        from prometheus_client import multiprocess

        multiprocess.mark_process_dead(worker.pid, _metrics_dir)


def on_exit(server):
    shutil.rmtree(os.environ.get("BIDSTATS_SLOT_DIR", ""), ignore_errors=True)


# ------------------------------------------------------------------ gunicorn's own error answers
def _problem_error(sock, status_int, reason, mesg):
    """gunicorn's answer to a request it cannot parse (400, 414, 431) or a request
    that failed outside the app, as problem+json (RFC 9457) rather than an HTML page."""
    body = json.dumps({"type": "about:blank", "title": reason, "status": status_int,
                       "detail": mesg or reason}).encode()
    head = (f"HTTP/1.1 {status_int} {reason}\r\nConnection: close\r\n"
            f"Content-Type: application/problem+json\r\nContent-Length: {len(body)}\r\n\r\n")
    gunicorn.util.write_nonblock(sock, head.encode("latin1") + body)


# The workers call gunicorn.util.write_error by module attribute; they are forked after this file is read.
gunicorn.util.write_error = _problem_error


# ------------------------------------------------------------------ slow clients
read_timeout = _whole("BIDSTATS_READ_TIMEOUT", 10)


class _ReadDeadline:
    """A client socket whose reads share one deadline for the whole request, so that a
    client trickling its headers or body a byte at a time cannot hold a sync worker.
    At the deadline a read returns end-of-stream: gunicorn drops the connection as a
    client that went away. Writing the answer is not bounded by it."""

    def __init__(self, sock, seconds):
        self._sock, self._deadline = sock, time.monotonic() + seconds

    def recv(self, size, *flags):
        remaining = self._deadline - time.monotonic()
        if remaining <= 0:
            return b""
        self._sock.settimeout(remaining)
        try:
            return self._sock.recv(size, *flags)
        except (socket.timeout, TimeoutError):
            return b""
        finally:
            self._sock.settimeout(None)

    def __getattr__(self, name):
        return getattr(self._sock, name)


class BoundedReadWorker(SyncWorker):
    """gunicorn's sync worker with a deadline for reading each request."""

    def accept(self, listener):
        client, addr = listener.accept()
        client.setblocking(1)
        gunicorn.util.close_on_exec(client)
        self.handle(listener, _ReadDeadline(client, read_timeout), addr)


worker_class = BoundedReadWorker
