"""What the Python tests under tests/cli and tests/report share: a check list that prints each check, the
environment that keeps a test's data root and locks in its own work folder, and the simulated controller
started on a free loopback port (its port read from its own first lines)."""
import os
import re
import subprocess
import time

FAILED = []


def expect(what, ok, detail=""):
    """One check: printed as ok/FAIL; a failure keeps its detail."""
    print(("ok   " if ok else "FAIL ") + what)
    if not ok:
        FAILED.append(what)
        if detail:
            print("     " + str(detail).replace("\n", "\n     "))


def finish():
    """The script's exit code: 1 when any check failed."""
    print("%d failed" % len(FAILED))
    return 1 if FAILED else 0


def env(workdir, **extra):
    """This process's environment with the data root and the lock folder inside `workdir`, plus `extra`."""
    e = dict(os.environ)
    e["LOADTRIM_LOCK_DIR"] = os.path.join(workdir, "locks")
    e["LOADTRIM_DATA_DIR"] = os.path.join(workdir, "data")
    e.update(extra)
    return e


def start_sim(sim, src, time_scale=100, extra=()):
    """loadtrim-sim with the demo vehicle's truth on port 0; (process, port). Waits at most 20 s for the port."""
    p = subprocess.Popen([sim, "--truth", os.path.join(src, "samples/truths/demo-hatchback.toml"), "--port", "0",
                          "--time-scale", str(time_scale), "--watchdog-ms", "1000", "--exit-after-s", "300"] +
                         list(extra), stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline:
        m = re.search(r"listening.*127\.0\.0\.1:(\d+)", p.stdout.readline())
        if m:
            return p, int(m.group(1))
    p.kill()
    raise SystemExit("loadtrim-sim did not print its port")
