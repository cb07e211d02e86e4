"""`make spreadsheet-test`: the GET doors in a real spreadsheet, LibreOffice Calc.

Starts the service (the venv's gunicorn with gunicorn.conf.py, 2 workers) on a free
loopback port and headless Calc with a throwaway user profile, listening for UNO on
another loopback port; runs spreadsheet/calc_driver.py under Debian's /usr/bin/python3
(the one Python with the uno module); stops both at the end, also on failure or Ctrl-C.

    .venv/bin/python spreadsheet/run.py [--survey] [--service URL]

--survey    print what each cell shows in each locale, checking nothing (to compare builds)
--service   use a service already answering at URL (a loopback address) instead of starting one

Without soffice or python3-uno (which `make spreadsheet-test` installs with apt-get) the run
is skipped with a message and exit status 0.
"""
from __future__ import annotations

import argparse
import os
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "loadtest"))
from harness import LOOPBACK, Gunicorn, free_port  # noqa: E402

SYSTEM_PYTHON = "/usr/bin/python3"  # Debian's python3-uno is built for it alone
DRIVER = ROOT / "spreadsheet" / "calc_driver.py"
OFFICE_START_TIMEOUT = 90
DRIVER_TIMEOUT = 300


def missing_tools():
    """Why Calc cannot be driven here, or None."""
    if shutil.which("soffice") is None:
        return "soffice is not installed (apt-get install libreoffice-calc)"
    probe = subprocess.run([SYSTEM_PYTHON, "-c", "import uno"], capture_output=True) if os.access(SYSTEM_PYTHON, os.X_OK) else None
    if probe is None or probe.returncode != 0:
        return f"{SYSTEM_PYTHON} cannot import uno (apt-get install python3-uno)"
    return None


def start_office(profile, port, log):
    """Headless Calc in its own session (so that it and its children stop together)."""
    cmd = ["soffice", "--headless", "--invisible", "--norestore", "--nologo", "--nodefault", "--nolockcheck",
           f"-env:UserInstallation={Path(profile).as_uri()}", f"--accept=socket,host={LOOPBACK},port={port};urp;"]
    proc = subprocess.Popen(cmd, stdout=log, stderr=subprocess.STDOUT, start_new_session=True)
    deadline = time.monotonic() + OFFICE_START_TIMEOUT
    while time.monotonic() < deadline:
        with socket.socket() as s:
            if s.connect_ex((LOOPBACK, port)) == 0:
                return proc
        if proc.poll() is not None and not _group_alive(proc.pid):
            raise RuntimeError(f"soffice exited with {proc.returncode} before listening on port {port}")
        time.sleep(0.25)
    raise RuntimeError(f"soffice did not listen on port {port} within {OFFICE_START_TIMEOUT} s")


def _group_alive(pgid):
    try:
        os.killpg(pgid, 0)
        return True
    except ProcessLookupError:
        return False


def stop_office(proc):
    """The driver asks the office to terminate; whatever of its session is left is killed."""
    if proc is None:
        return
    deadline = time.monotonic() + 20
    while _group_alive(proc.pid) and time.monotonic() < deadline:
        proc.poll()
        time.sleep(0.2)
    if _group_alive(proc.pid):
        os.killpg(proc.pid, signal.SIGKILL)
    proc.wait(timeout=10)


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--survey", action="store_true")
    parser.add_argument("--service", help="the URL of a running service on 127.0.0.1")
    args = parser.parse_args()
    why = missing_tools()
    if why:
        print(f"spreadsheet: SKIPPED: {why}; `make spreadsheet-test` installs it as root with apt-get")
        print("spreadsheet: 0 passed, 0 failed, 1 skipped")
        return 0
    if args.service and not args.service.startswith(f"http://{LOOPBACK}:"):
        parser.error(f"--service must be http://{LOOPBACK}:PORT")
    tmp = Path(tempfile.mkdtemp(prefix="bidstats-sheet-"))
    (tmp / "docs").mkdir()
    server = office = None
    started = time.monotonic()
    try:
        with open(tmp / "soffice.log", "wb") as office_log:
            if not args.service:
                server = Gunicorn(log_path=tmp / "gunicorn.log").start()
            port = free_port()
            office = start_office(tmp / "profile", port, office_log)
            cmd = [SYSTEM_PYTHON, str(DRIVER), "--service", args.service or server.url, "--office-port", str(port),
                   "--workdir", str(tmp / "docs")] + (["--survey"] if args.survey else [])
            try:
                code = subprocess.run(cmd, timeout=DRIVER_TIMEOUT).returncode
            except subprocess.TimeoutExpired:
                print(f"spreadsheet: the driver did not finish within {DRIVER_TIMEOUT} s")
                code = 1
        if code != 0:
            for name in ("gunicorn.log", "soffice.log"):
                if (tmp / name).exists():
                    print(f"--- last lines of {name}\n" + "\n".join((tmp / name).read_text(errors="replace").splitlines()[-20:]))
        print(f"spreadsheet: finished in {time.monotonic() - started:.1f} s")
        return code
    finally:
        stop_office(office)
        if server:
            server.stop()
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
