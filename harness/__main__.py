"""The entry point of the ``rlharness`` command and of ``python -m harness``.

Start-up is covered against stop signals too: :func:`main` turns SIGTERM into the Ctrl-C path
first thing, before it imports the command line layer, so a SIGINT or SIGTERM that arrives
while the command is still importing ends it with exit 130 and no traceback, exactly as one
that arrives later (``harness.cli.main``). Left open: the Python interpreter's own start-up
before this module runs (the ``python`` process starting, ``site``, and ``harness/__init__.py``),
where SIGINT raises a ``KeyboardInterrupt`` with a traceback or kills (-2) and SIGTERM kills
(-15); docs/verdicts.md gives its measured length (about 44 ms).
"""

import sys

from harness.core.interrupt import INTERRUPTED, sigterm_as_interrupt


def main() -> int:
    """Run ``rlharness`` with the process's arguments; return its exit code."""
    try:
        with sigterm_as_interrupt():
            from harness.cli import main as command

            return command()
    except KeyboardInterrupt:  # before harness.cli.main took over (it handles its own)
        print(INTERRUPTED, file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
