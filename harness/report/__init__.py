"""Renderers: results and verdicts as terminal (rich), Markdown, JSON, JUnit XML and plots.

One module per output; each takes result objects from the layers below and
draws them. Only ``harness.report``, ``harness.cli`` and
``harness.pytest_plugin`` import rich.
"""
