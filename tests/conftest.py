"""Test-wide settings: the run cache's MAC secret comes from the environment, not the user's home folder."""

import os

# harness.store.cache keys each entry's HMAC with $RLHARNESS_CACHE_KEY when set; without it the
# suite would create ~/.config/rl-harness/cache-key. Subprocesses started by tests inherit it.
os.environ.setdefault("RLHARNESS_CACHE_KEY", "rl-harness test suite")
