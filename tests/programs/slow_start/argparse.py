"""Stands in for the standard library's argparse in tests/test_signals.py: a slow start-up import.

``harness.cli`` is the first module of an ``rlharness`` start-up to import argparse; with this
folder first on PYTHONPATH, that import creates the file ``$SLOW_START_MARKER`` and pauses for
``$SLOW_START_SECONDS`` (default 30), as a heavy import on a loaded machine would. The test
sends its signal during the pause. Were it not stopped, the real argparse is loaded after it.
"""

import importlib
import os
import sys
import time

open(os.environ["SLOW_START_MARKER"], "w").close()
time.sleep(float(os.environ.get("SLOW_START_SECONDS", "30")))
sys.path.remove(os.path.dirname(os.path.abspath(__file__)))
del sys.modules[__name__]
sys.modules[__name__] = importlib.import_module(__name__)
