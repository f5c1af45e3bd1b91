"""pytest plugin of rl-harness (registered through the ``pytest11`` entry point)."""
