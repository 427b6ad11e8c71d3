"""Run the ``retol`` command line in a subprocess with one fault injected (tests only).

Usage: ``python tests/faultdriver.py MODE retol-arguments...`` where MODE is

- ``pause``: the Monte Carlo waits, after creating the file ``$RETOL_FAULT_FLAG``, until the file
  ``$RETOL_FAULT_GO`` exists (at most 60 s); a test then starts a second run, or signals this one.
- ``sigint-in-move``: the first rename of a file into the folder ``$RETOL_FAULT_TARGET`` is
  followed by a SIGINT to this process, as if Ctrl-C came while results are moved into place.
- ``none``: no fault.
"""

from __future__ import annotations

import os
import signal
import sys
import time
from pathlib import Path


def _pause():
    import tolerance.montecarlo as mc

    real = mc.run

    def paused(*args, **kwargs):
        Path(os.environ["RETOL_FAULT_FLAG"]).write_text(str(os.getpid()))
        go = Path(os.environ["RETOL_FAULT_GO"])
        t0 = time.monotonic()
        while not go.exists() and time.monotonic() - t0 < 60:
            time.sleep(0.05)
        return real(*args, **kwargs)

    mc.run = paused


def _sigint_in_move():
    target = os.environ["RETOL_FAULT_TARGET"].rstrip(os.sep) + os.sep
    state = {"sent": False}

    def wrap(func):
        def moved(src, dst, *args, **kwargs):
            out = func(src, dst, *args, **kwargs)
            if not state["sent"] and os.fspath(dst).startswith(target):
                state["sent"] = True
                os.kill(os.getpid(), signal.SIGINT)
            return out

        return moved

    os.rename = wrap(os.rename)
    os.replace = wrap(os.replace)


def main():
    mode, args = sys.argv[1], sys.argv[2:]
    # Ctrl-C as at a terminal: a test run started in the background (``pytest &``) passes on an
    # ignored SIGINT, which Python then keeps ignoring, and the injected interrupt would be lost.
    signal.signal(signal.SIGINT, signal.default_int_handler)
    {"pause": _pause, "sigint-in-move": _sigint_in_move, "none": lambda: None}[mode]()
    from tolerance.cli.main import cli

    cli.main(args, prog_name="retol")


if __name__ == "__main__":
    main()
