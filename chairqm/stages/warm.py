"""Warm starts of stage jobs: one process per local run imports the libraries once and forks a child
for every stage job, so that a job costs a fork instead of an interpreter plus ~1 s of imports.

Every stage job is still its own process with its own command line, working folder, environment, log
and exit status: the job's shell runs `python -m chairqm.stages STAGE ...` as always; that process (the
*client*, which imports nothing heavy) finds $CHAIRQM_WARM_SOCKET, hands its command line, folder,
environment and its standard input, output and error (the file descriptors themselves, so the log
redirection of the job holds) to the *starter* over a Unix socket, and waits. The starter forks; the
child takes over the client's descriptors, folder and environment and runs the same `main()` the
client would have run; its exit status goes back to the client, which exits with it (or dies of the
same signal). A signal to the client is passed on to the child; a client that vanishes (SIGKILL) has
its child stopped. Nothing else changes: records, `--until`, rerun triggers and the kill/resume
guarantees are those of the stage runner.

Used only for local runs (`chairqm run` starts the starter when Snakemake's executor is local); jobs on
a cluster, or any job that cannot reach the starter, run in their own interpreter exactly as before.
CHAIRQM_WARM=0 switches it off.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import struct
import sys
import time

SOCKET_ENV = "CHAIRQM_WARM_SOCKET"
#: True in a stage job forked by the starter (its worker pools may then fork too: records.worker_context)
IN_CHILD = False
SWITCH_ENV = "CHAIRQM_WARM"

#: What a stage job imports lazily, loaded once by the starter (a library that is missing is skipped;
#: the child then imports it itself, as a cold job would).
PRELOAD = ("numpy", "scipy.optimize", "pandas", "yaml", "rdkit.Chem.AllChem", "ase", "ase.io", "ase.optimize",
           "ase.vibrations", "ase.db", "tblite.interface", "matplotlib", "jinja2",
           "chairqm.stages.intake", "chairqm.stages.seeds", "chairqm.stages.minima", "chairqm.stages.thermo",
           "chairqm.stages.ensemble", "chairqm.stages.report", "chairqm.seeds", "chairqm.optimize",
           "chairqm.engine", "chairqm.hessian", "chairqm.thermo", "chairqm.ensemble", "chairqm.report",
           "matplotlib.figure", "matplotlib.backends.backend_svg", "chairqm.report.page", "chairqm.report.figures",
           "chairqm.report.views3d")


def enabled(environ=None) -> bool:
    return (environ or os.environ).get(SWITCH_ENV, "1").strip().lower() not in ("0", "off", "no", "false")


# ------------------------------------------------------------------------------------------- protocol

def _send_message(sock, payload: dict, fds=()):
    data = json.dumps(payload).encode()
    blob = struct.pack("!I", len(data)) + data
    if fds:
        sent = socket.send_fds(sock, [blob], list(fds))
        blob = blob[sent:]
    if blob:
        sock.sendall(blob)


def _recv_message(sock):
    """(payload, fds) of one message; ({}, []) when the peer closed first."""
    blob, fds, _, _ = socket.recv_fds(sock, 65536, 8)
    if not blob:
        return {}, list(fds)
    while len(blob) < 4:
        more = sock.recv(65536)
        if not more:
            return {}, list(fds)
        blob += more
    (n,) = struct.unpack("!I", blob[:4])
    while len(blob) < 4 + n:
        more = sock.recv(65536)
        if not more:
            return {}, list(fds)
        blob += more
    return json.loads(blob[4:4 + n]), list(fds)


def _read_line(sock, buf: bytearray) -> str | None:
    while b"\n" not in buf:
        try:
            more = sock.recv(256)
        except InterruptedError:        # pragma: no cover - PEP 475 retries; kept for clarity
            continue
        if not more:
            return None
        buf.extend(more)
    line, _, rest = bytes(buf).partition(b"\n")
    buf[:] = rest
    return line.decode()


# --------------------------------------------------------------------------------------------- client

def delegate(path: str, argv: list[str]) -> int | None:
    """Run this stage job in a child of the starter at `path`; its exit code, or None when the starter
    cannot be reached (the caller then runs the job itself)."""
    try:
        sock = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
        sock.connect(path)
        _send_message(sock, {"argv": list(argv), "cwd": os.getcwd(), "env": dict(os.environ)}, fds=(0, 1, 2))
    except OSError:
        return None
    buf = bytearray()
    first = _read_line(sock, buf)
    if not first or not first.startswith("pid "):
        return None if first is None else 1
    child = int(first.split()[1])
    received = []

    def forward(signum, frame):
        received.append(signum)
        try:
            os.kill(child, signum)
        except OSError:
            pass
    for sig in (signal.SIGTERM, signal.SIGINT, signal.SIGHUP):
        signal.signal(sig, forward)
    status = _read_line(sock, buf)
    if status is None:          # the starter went away before the child ended (it was stopped)
        sig = received[-1] if received else signal.SIGTERM
        print(f"chairqm: the warm starter stopped before this job ended ({signal.Signals(sig).name})",
              file=sys.stderr)
        return 128 + sig
    kind, value = status.split()
    if kind == "signal":
        sig = int(value)
        signal.signal(sig, signal.SIG_DFL)
        os.kill(os.getpid(), sig)        # end as the job would have: killed by the same signal
        return 128 + sig
    return int(value)


# -------------------------------------------------------------------------------------------- starter

def preload() -> list[str]:
    """Import what stage jobs need; the names that could not be imported."""
    import importlib
    missing = []
    for name in PRELOAD:
        try:
            importlib.import_module(name)
        except Exception:               # noqa: BLE001 - an optional library; the child imports it or fails itself
            missing.append(name)
    try:                                # the report's templates, compiled once
        from ..report import page
        env = page.environment()
        for name in env.list_templates():
            env.get_template(name)
    except Exception:                   # noqa: BLE001 - the report job compiles them itself
        missing.append("report templates")
    return missing


def _run_child(conn, listener, payload: dict, fds: list[int]) -> None:
    """In the forked child: become the stage job and never return."""
    global IN_CHILD
    IN_CHILD = True
    code = 1
    try:
        for sig in (signal.SIGTERM, signal.SIGHUP):
            signal.signal(sig, signal.SIG_DFL)
        signal.signal(signal.SIGINT, signal.default_int_handler)
        listener.close()
        conn.close()
        for target, fd in zip((0, 1, 2), fds):
            os.dup2(fd, target)
        for fd in fds:
            if fd > 2:
                os.close(fd)
        os.chdir(payload["cwd"])
        os.environ.clear()
        os.environ.update(payload["env"])
        os.environ.pop(SOCKET_ENV, None)
        argv = list(payload["argv"])
        sys.argv = [sys.argv[0]] + argv
        from .__main__ import main
        try:
            code = main(argv)
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
            if not isinstance(exc.code, (int, type(None))):
                print(exc.code, file=sys.stderr)
        except KeyboardInterrupt:
            signal.signal(signal.SIGINT, signal.SIG_DFL)
            os.kill(os.getpid(), signal.SIGINT)
    except BaseException:               # noqa: BLE001 - the traceback goes to the job's log, as in a cold job
        import traceback
        traceback.print_exc()
        code = 1
    finally:
        try:
            sys.stdout.flush()
            sys.stderr.flush()
        except Exception:               # noqa: BLE001
            pass
        os._exit(code if isinstance(code, int) else 1)


def _watch(conn, pid: int) -> None:
    """In the starter: report the child's pid and, when it ends, its status; stop it if its client goes."""
    import select
    try:
        conn.sendall(f"pid {pid}\n".encode())
    except OSError:
        pass
    client_gone = False
    while True:
        try:
            done, status = os.waitpid(pid, os.WNOHANG)
        except ChildProcessError:
            done, status = pid, 0
        if done:
            break
        if not client_gone:
            r, _, _ = select.select([conn], [], [], 0.1)
            if r:
                try:
                    data = conn.recv(64)
                except OSError:
                    data = b""
                if not data:
                    client_gone = True
                    try:
                        os.kill(pid, signal.SIGTERM)
                    except OSError:
                        pass
        else:
            time.sleep(0.1)
    if os.WIFSIGNALED(status):
        line = f"signal {os.WTERMSIG(status)}\n"
    else:
        line = f"exit {os.WEXITSTATUS(status) if os.WIFEXITED(status) else 1}\n"
    try:
        conn.sendall(line.encode())
    except OSError:
        pass
    conn.close()


def serve(path: str) -> None:
    """Listen at `path` (bound before the imports, so that early jobs wait instead of missing it), load
    the libraries, then fork a child per connection until stopped."""
    import threading

    from ..engine import set_threads
    set_threads(1)          # as the stage runner does, before any engine is imported
    listener = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    listener.bind(path)
    listener.listen(128)
    preload()
    while True:
        try:
            conn, _ = listener.accept()
        except InterruptedError:        # pragma: no cover
            continue
        try:
            payload, fds = _recv_message(conn)
        except (OSError, ValueError):
            conn.close()
            continue
        if not payload or len(fds) != 3:
            for fd in fds:
                os.close(fd)
            conn.close()
            continue
        pid = os.fork()
        if pid == 0:
            _run_child(conn, listener, payload, fds)
        for fd in fds:
            os.close(fd)
        threading.Thread(target=_watch, args=(conn, pid), daemon=True).start()


if __name__ == "__main__":
    # run as the importable module, not as __main__, so that IN_CHILD is the flag the stages read
    from chairqm.stages import warm as _module
    _module.serve(sys.argv[1])
