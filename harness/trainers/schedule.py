"""The linear exploration schedule shared by the built-in trainers."""

from __future__ import annotations

__all__ = ["linear_decay"]


def linear_decay(start: float, end: float, steps: int, step: int) -> float:
    """``start`` at step 0, falling linearly to ``end`` at ``steps``, then ``end`` exactly.

    The usual epsilon-greedy schedule (common practice; Mnih et al. 2015 decay epsilon
    linearly from 1.0 to 0.1 over their first million frames). ``steps = 0`` means ``end``
    from the start.

    Examples
    --------
    >>> [round(linear_decay(1.0, 0.1, 10, t), 2) for t in (0, 5, 10, 20)]
    [1.0, 0.55, 0.1, 0.1]
    >>> linear_decay(1.0, 0.05, 0, 0)
    0.05
    """
    if step >= steps:
        return end
    return end + (start - end) * (1.0 - step / steps)
