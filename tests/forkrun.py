"""Run many `reviewer` command lines fast: `python forkrun.py CASES.json RESULTS.json`.

The program's modules are imported once; then every command line runs in its own forked child
process, as the `reviewer` console script runs it (`sys.exit(main())`: an uncaught exception prints
its traceback and exits 1), with its own stdout and stderr files and a time limit (killed after it:
"timeout"). CASES.json: [{"argv": [...], "cwd": "...", "timeout": seconds}, ...]. RESULTS.json:
[{"rc": int | "timeout", "stdout": str, "stderr": str}, ...] in the same order.
"""

from __future__ import annotations

import json
import os
import signal
import sys
import tempfile
import time
import traceback


def _child(argv: list[str], cwd: str, out_fd: int, err_fd: int) -> None:
    os.dup2(out_fd, 1)
    os.dup2(err_fd, 2)
    rc = 1
    try:
        os.chdir(cwd)
        from reviewer.cli import main

        rc = main(argv)
    except SystemExit as exc:
        rc = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    except BaseException:
        traceback.print_exc()
        rc = 1
    finally:
        try:
            sys.stdout.flush()
            sys.stderr.flush()
        finally:
            os._exit(rc if isinstance(rc, int) else 1)


def run_case(case: dict) -> dict:
    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        pid = os.fork()
        if pid == 0:
            _child(case["argv"], case["cwd"], out.fileno(), err.fileno())
        deadline = time.monotonic() + float(case.get("timeout", 20))
        rc: int | str = "timeout"
        while time.monotonic() < deadline:
            done, status = os.waitpid(pid, os.WNOHANG)
            if done:
                rc = os.waitstatus_to_exitcode(status)
                break
            time.sleep(0.005)
        else:
            os.kill(pid, signal.SIGKILL)
            os.waitpid(pid, 0)
        out.seek(0)
        err.seek(0)
        return {"rc": rc, "stdout": out.read().decode("utf-8", "backslashreplace"),
                "stderr": err.read().decode("utf-8", "backslashreplace")}


def main() -> None:
    with open(sys.argv[1]) as f:
        cases = json.load(f)
    import reviewer.cli
    import reviewer.commands.info
    import reviewer.commands.kinetics
    import reviewer.commands.scan
    import reviewer.kinetics  # noqa: F401 - the slow imports happen once, before the forks

    reviewer.cli.build_parser()
    sys.stdout.flush()
    sys.stderr.flush()
    results = [run_case(c) for c in cases]
    with open(sys.argv[2], "w") as f:
        json.dump(results, f)


if __name__ == "__main__":
    main()
