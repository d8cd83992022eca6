"""The ``ionbal`` command's entry point: Ctrl-C gives one line and exit status 130 at every moment.

The console script imports this module before anything else of ionbal, so it imports nothing heavy
(``_signal`` and ``sys`` are loaded by Python itself; ``ionbal/__init__`` imports its parts lazily).
Its SIGINT handler is installed first and knows three phases:

* starting - the command line and its libraries (numpy, astropy, ...) are still being imported: no
  file has been touched, so the process ends at once with the one-line message and 130;
* running  - the first Ctrl-C is raised as ``KeyboardInterrupt`` for the command line's own handling
  (which cleans up and prints the same line); a further one during that clean-up is ignored.  One
  that arrives inside a finalizer (a weakref callback or ``__del__``, where Python would print and
  drop the exception) is raised again 5 ms later, outside it, and one that Python dropped all the
  same (code called back from C, such as the compiler's ctypes callbacks) is caught by
  ``sys.unraisablehook``, not printed, and raised again the same way;
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


#: seconds after which a Ctrl-C that came inside a finalizer is raised again (SIGALRM)
RETRY_AFTER = 0.005


def _in_finalizer(frame) -> bool:
    """Is the interrupted code (or a caller of it) a weakref callback or a ``__del__``?

    Python runs those from C while it frees objects, and prints ("Exception ignored in ...") and
    drops whatever they raise: a ``KeyboardInterrupt`` raised there would be lost and show a
    traceback (issue 16: Ctrl-C during the final assembly of a grid).
    """
    while frame is not None:
        code = frame.f_code
        if code.co_name == "__del__" or code.co_filename.endswith(("weakref.py", "_weakrefset.py")):
            return True
        frame = frame.f_back
    return False


def _unraisable(hook_args) -> None:
    """``sys.unraisablehook``: a Ctrl-C that Python dropped (it came inside code called back from C,
    e.g. a ctypes callback of the compiler, a finalizer) is not printed but raised again shortly."""
    if issubclass(hook_args.exc_type, KeyboardInterrupt) and _phase[0] == STOPPING:
        _phase[0] = RUNNING
        signal.setitimer(signal.ITIMER_REAL, RETRY_AFTER)
        return
    sys.__unraisablehook__(hook_args)


def _on_sigint(signum, frame):
    phase = _phase[0]
    if phase == RUNNING:
        if _in_finalizer(frame):
            # not here: raise it a moment later, on the next bytecode outside the finalizer
            signal.setitimer(signal.ITIMER_REAL, RETRY_AFTER)
            return
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
    signal.signal(signal.SIGALRM, _on_sigint)  # the retry of a Ctrl-C that came inside a finalizer
    sys.unraisablehook = _unraisable
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
