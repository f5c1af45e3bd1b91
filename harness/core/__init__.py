"""Core: the values and rules every layer shares.

Errors, atomic file writes, the settings resolver, learning curves, RunSpec (with
the canonical JSON and hashes) and seeding. Imports nothing else of rl-harness.
"""
