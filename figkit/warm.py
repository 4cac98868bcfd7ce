"""One warm interpreter for a workflow's figure jobs.

Each figure job of the Snakemake rules runs ``python -m figkit render --id ID``; a fresh
interpreter pays ~1.5 s of imports (pandas, matplotlib, scipy.special, fontTools, ...) before any
figure work, a third of the demo's whole build.  Here a job's process stays a job of its own
(Snakemake still sees one job per figure: its own exit status, log, outputs and reruns) but
only sends its command line, environment, working folder and its stdin/stdout/stderr (passed as
file descriptors, SCM_RIGHTS) to a *warm server* that has done the imports once.  The server
forks a child per request; the child takes the job's descriptors, folder and environment and runs
``figkit.cli.main`` exactly as the job's own interpreter would.  A fork starts from the server's
state, which holds imported modules only (no project file is read before the fork), so every
figure begins as in a fresh process and its files are byte-identical (tests/test_warm_build.py).

Lifetime: the workflow (``figkit.workflow.warm_jobs``, called when the Snakefile is read) names
a socket and its owner, the Snakemake process, in ``FIGKIT_WARM``.  The first job to find no
server starts one (under a lock, so parallel jobs start one between them); the server ends when
its owner has gone or after IDLE_S without a request.  On a cluster node, the Snakemake that runs
a group job reads the workflow again and so owns a server of its own: one set of imports per group
job.  Signals sent to a job's process are forwarded to its child; a job killed outright takes its
child down with it.  Anything that keeps the client from handing over (no fork or Unix sockets on
this system, a server that does not start) falls back to rendering in the job's own process: an
optimisation never fails a build.  ``FIGKIT_WARM=off`` turns the server off.

Each server start and each forked render may append a line to the file named by
``FIGKIT_PROCESS_LOG`` (as does a render in its own interpreter, see cli.py): how the tests count
interpreter starts.
"""
from __future__ import annotations

import fcntl
import gc
import json
import os
import signal
import socket
import struct
import subprocess
import sys
import time

VAR = "FIGKIT_WARM"
LOG_VAR = "FIGKIT_PROCESS_LOG"
OFF = ("off", "0", "no", "false")
IDLE_S = 600.0           # a server nobody has used for this long ends even if its owner lives
START_WAIT_S = 120.0     # how long a job waits for a starting server (its imports) before rendering itself
_HEADER = struct.Struct("!I")
FORKED = False           # True in a render forked by the server (it must not hand itself over again)

# What a render imports, done once by the server.  Modules only: nothing here reads the project.
PRELOAD = ("figkit.cli", "figkit.render", "figkit.draw", "figkit.charts", "figkit.checks",
           "figkit.preflight", "figkit.provenance", "figkit.data", "figkit.style", "figkit.jobsize",
           "figkit.progress", "figkit.workflow", "matplotlib.figure", "matplotlib.backends.backend_agg",
           "matplotlib.backends.backend_pdf", "matplotlib.backends.backend_svg", "fontTools.subset",
           "pypdf")


def available() -> bool:
    return hasattr(os, "fork") and hasattr(socket, "AF_UNIX") and hasattr(socket, "send_fds")


def setting(environ=os.environ) -> tuple[str, int] | None:
    """(socket path, owner pid) from ``FIGKIT_WARM``, or None when unset, off or malformed."""
    value = environ.get(VAR, "")
    owner, sep, path = value.partition(":")
    if value.lower() in OFF or not sep or not owner.isdigit() or not path:
        return None
    return path, int(owner)


def socket_path(owner: int) -> str:
    """A private folder in the temporary folder (this user only), one socket per owner.  Kept short:
    a Unix socket's path has at most ~100 bytes."""
    import tempfile
    base = os.path.join(tempfile.gettempdir(), f"figkit-warm-{os.getuid()}")
    os.makedirs(base, mode=0o700, exist_ok=True)
    st = os.stat(base)
    if st.st_uid != os.getuid() or st.st_mode & 0o077:
        raise OSError(f"{base} is not private to this user")
    return os.path.join(base, f"{owner}-{os.urandom(4).hex()}.sock")


def note(event: str, what: str = "") -> None:
    """One line per interpreter start or forked render in FIGKIT_PROCESS_LOG (tests count them)."""
    path = os.environ.get(LOG_VAR)
    if path:
        with open(path, "a", encoding="utf-8") as fh:
            fh.write(f"{event} {os.getpid()} {what}\n")


# ------------------------------------------------------------------------------ the job's side
def run_client(argv: list[str]) -> int | None:
    """Hand ``figkit ARGV`` to the warm server: its exit status, or None when the server cannot
    take it (the caller then renders in this process)."""
    where = setting()
    if where is None or not available():
        return None
    path, owner = where
    conn = None
    try:
        conn = _connect(path) or _start_server(path, owner)
        if conn is None:
            return None
        request = json.dumps({"argv": argv, "env": dict(os.environ), "cwd": os.getcwd(),
                              "sys_argv": sys.argv}).encode()
        socket.send_fds(conn, [_HEADER.pack(len(request))], [0, 1, 2])
        conn.sendall(request)
        conn.settimeout(START_WAIT_S)
        if conn.recv(1) != b"A":       # the server ended before taking it: nothing has started
            conn.close()
            return None
        conn.settimeout(None)
    except OSError:     # closed first: a render that would start late finds no job and ends
        if conn is not None:
            conn.close()
        return None
    return _wait(conn)


def _wait(conn: socket.socket) -> int:
    """Forward the signals a job receives to its render; the render's exit status."""
    sent = []

    def forward(signum, _frame):
        sent.append(signum)
        try:
            conn.sendall(bytes([signum]))
        except OSError:
            pass
    for s in (signal.SIGINT, signal.SIGTERM, signal.SIGHUP):
        signal.signal(s, forward)
    data = b""
    while True:
        try:
            chunk = conn.recv(2)
        except InterruptedError:
            continue
        if not chunk:
            break
        data += chunk
        if len(data) >= 2:
            break
    if data[:1] == b"X" and len(data) == 2:
        return data[1]
    if sent:          # the render ended on the forwarded signal: end the same way
        signal.signal(sent[-1], signal.SIG_DFL)
        os.kill(os.getpid(), sent[-1])
    sys.stderr.write("figkit: error: the figure's process ended without finishing (killed by the "
                     "system?); its files are left as they were\n")
    return 1


def _connect(path: str) -> socket.socket | None:
    s = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    try:
        s.connect(path)
        return s
    except OSError:
        s.close()
        return None


def _start_server(path: str, owner: int) -> socket.socket | None:
    """Start the server unless another job has just done so (a lock beside the socket), then
    wait for its socket: parallel jobs start one server between them."""
    with open(path + ".lock", "a") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        conn = _connect(path)
        if conn is not None:
            return conn
        if os.path.exists(path):      # left by a server that died: not answering
            os.unlink(path)
        proc = subprocess.Popen([sys.executable, "-m", "figkit.warm", path, str(owner)],
                                stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL,
                                stderr=subprocess.DEVNULL, start_new_session=True, close_fds=True)
        deadline = time.monotonic() + START_WAIT_S
        while time.monotonic() < deadline and proc.poll() is None:
            conn = _connect(path)
            if conn is not None:
                return conn
            time.sleep(0.02)
        return None


# ---------------------------------------------------------------------------- the server's side
def serve(path: str, owner: int) -> None:
    if __name__ != "figkit.warm":      # see the __main__ block: never serve from a second copy
        raise RuntimeError("figkit.warm.serve must run in the module figkit.warm")
    os.environ.setdefault("MPLBACKEND", "Agg")     # as cli.main does before anything is drawn
    # The imported modules are frozen out of the cyclic collector before any fork, as Python's gc
    # documentation advises for fork without exec: a render's collections then neither walk the
    # pipeline's long-lived objects nor touch (and so copy) their memory pages.  Memory more than
    # speed: builds with and without it took the same CPU within run-to-run noise (16 demo
    # figures, three alternating builds each).
    gc.disable()
    import importlib
    for name in PRELOAD:
        try:
            importlib.import_module(name)
        except ImportError:    # an optional piece missing: the render imports (or misses) it itself
            pass
    gc.freeze()
    note("interpreter", "warm server")
    listener = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    listener.bind(path)           # made only now, so a connection means the imports are done
    listener.listen(16)
    listener.settimeout(1.0)
    last = time.monotonic()
    try:
        while _alive(owner) and time.monotonic() - last < IDLE_S:
            try:
                conn, _ = listener.accept()
            except TimeoutError:
                _reap()
                continue
            last = time.monotonic()
            conn.settimeout(None)
            if os.fork() == 0:
                listener.close()
                _child(conn)       # never returns
            conn.close()
            _reap()
    finally:
        for name in (path, path + ".lock"):   # first: no job may wait on a server that is ending
            try:
                os.unlink(name)
            except OSError:
                pass
        listener.close()
        _reap(block=True)
        t = os.times()     # the server's CPU and its renders' (reaped), for the benchmarks' accounts
        note("exit", f"cpu_s={t.user + t.system + t.children_user + t.children_system:.3f}")


def _reap(block: bool = False) -> None:
    """Collect ended renders (no zombies; their CPU time joins the server's children's).
    ``block``: wait for every render still running (the server is ending)."""
    while True:
        try:
            pid, _ = os.waitpid(-1, 0 if block else os.WNOHANG)
        except ChildProcessError:
            return
        if pid == 0:
            return


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _read(conn: socket.socket, n: int) -> bytes:
    out = b""
    while len(out) < n:
        chunk = conn.recv(n - len(out))
        if not chunk:          # the job went away before its request was whole
            os._exit(1)
        out += chunk
    return out


def _child(conn: socket.socket) -> None:
    code = 1
    try:
        head, fds, _, _ = socket.recv_fds(conn, _HEADER.size, 3)
        head += _read(conn, _HEADER.size - len(head))
        body = _read(conn, _HEADER.unpack(head)[0])
        req = json.loads(body)
        try:
            conn.sendall(b"A")
        except OSError:       # the job gave up waiting and renders itself: leave it alone
            os._exit(1)
        global FORKED
        FORKED = True
        gc.enable()            # the server runs without it (above); a render collects as usual
        for target, fd in enumerate(fds):
            os.dup2(fd, target)
            os.close(fd)
        os.chdir(req["cwd"])
        os.environ.clear()
        os.environ.update(req["env"])
        sys.argv = req["sys_argv"]
        sys.stdout.reconfigure(line_buffering=os.isatty(1))
        _watch(conn)
        note("fork", " ".join(req["argv"]))
        from figkit.cli import main
        try:
            code = main(req["argv"])
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
            if not isinstance(exc.code, (int, type(None))):
                print(exc.code, file=sys.stderr)
    except BaseException:        # as an uncaught exception in a fresh interpreter: traceback, status 1
        import traceback
        traceback.print_exc()
        code = 1
    finally:
        try:
            sys.stdout.flush()
            sys.stderr.flush()
        except Exception:
            pass
        _FINISHED.append(True)
        try:
            conn.sendall(b"X" + bytes([code & 0xFF]))
        except OSError:
            pass
        os._exit(code & 0xFF)


_FINISHED: list = []


def _watch(conn: socket.socket) -> None:
    """A signal the job received arrives as one byte: raise it here.  The job gone without one
    (killed outright): end as a fresh process would on SIGTERM."""
    import threading

    def run():
        while True:
            try:
                b = conn.recv(1)
            except OSError:
                b = b""
            if _FINISHED:
                return
            if not b:
                os.kill(os.getpid(), signal.SIGTERM)
                return
            os.kill(os.getpid(), b[0])
    threading.Thread(target=run, daemon=True).start()


if __name__ == "__main__":
    # Run as figkit.warm, not as __main__: the forked renders mark that module FORKED, which is
    # what keeps cli.main in a render from handing itself over again.
    from figkit import warm as _module
    _module.serve(sys.argv[1], int(sys.argv[2]))
