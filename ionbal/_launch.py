"""The ``ionbal`` command's entry point: Ctrl-C gives one line and exit status 130 at every moment.

The console script imports this module before anything else of ionbal, so it imports nothing heavy
(``_signal`` and ``sys`` are loaded by Python itself; ``ionbal/__init__`` imports its parts lazily).
Its SIGINT handler is installed first and knows three phases:

* starting - the command line and its libraries (numpy, astropy, ...) are still being imported: no
  file has been touched, so the process ends at once with the one-line message and 130;
* running  - the first Ctrl-C is raised as ``KeyboardInterrupt`` for the command line's own handling
  (which cleans up and prints the same line); a further one during that clean-up is ignored;
* done     - the command has finished and its result is complete: a late Ctrl-C is ignored, so the
  exit status stays the one the command returned.

Only one ``KeyboardInterrupt`` is ever raised, and only inside the ``try`` below, so no moment of a
Ctrl-C can print a traceback.  What is left is Python's own start-up before this module runs.
"""

from __future__ import annotations

import sys

import _signal as signal  # the interpreter's own module, already loaded (``signal`` would import enum)

INTERRUPTED = "ionbal: interrupted"
EXIT_INTERRUPTED = 130
STARTING, RUNNING, STOPPING, DONE = range(4)
_phase = [STARTING]


def _on_sigint(signum, frame):
    phase = _phase[0]
    if phase == RUNNING:
        _phase[0] = STOPPING
        raise KeyboardInterrupt
    if phase == STARTING:  # pragma: no cover - exercised by the process tests
        import os

        try:
            os.write(2, (INTERRUPTED + "\n").encode())
        finally:
            os._exit(EXIT_INTERRUPTED)
    # STOPPING or DONE: nothing to stop


def main() -> int:
    """Run ``ionbal`` with the arguments of the process; returns the exit status."""
    signal.signal(signal.SIGINT, _on_sigint)
    from .cli import main as run

    try:
        _phase[0] = RUNNING
        code = run(sys.argv[1:])
        _phase[0] = DONE
    except KeyboardInterrupt:  # one that came between the lines above and main()'s own handler
        print(INTERRUPTED, file=sys.stderr)
        code = EXIT_INTERRUPTED
    _phase[0] = DONE
    return code


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
