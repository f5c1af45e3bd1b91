"""Manifest: the TOML file parsed into a frozen ``Manifest``, its version pins and its gate policy.

``loader`` (parse, validate, fill defaults, config hash), ``pins`` (installed versions, drift,
writing ``[pins]``) and ``policy`` (``[check]`` and ``[[reference]]``).
"""
