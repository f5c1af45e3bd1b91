"""The curve file: a learning curve as plain text that any program can write.

Format ``rlharness-curve``, version 1 (specified for users in docs/your-training.md)::

    # rlharness-curve 1
    step,episode,return
    0,0,-41.5
    0,1,-38.0
    500,0,-12.25
    500,1,-9.75

* UTF-8 text (ASCII is enough), lines end with LF or CRLF.
* Line 1 is exactly ``# rlharness-curve 1`` (the format and its version).
* Line 2 is the header, exactly ``step,episode,return``; a file holding several
  seeds (for ``rlharness adopt``) has ``seed,step,episode,return``.
* Every further line is one evaluation episode: ``step`` the environment step of
  the checkpoint (digits), ``episode`` its 0-based index within the checkpoint
  (digits), ``return`` the episode's return as a decimal number (``-3``, ``0.25``,
  ``1e-3``; write 17 significant digits or the shortest round-trip form to keep
  every bit), ``seed`` the seed's label as the manifest plans it (``3``,
  ``2026/0``). No spaces, quotes, blank lines or extra columns.
* A checkpoint's episodes are consecutive lines, episodes ``0 .. E-1`` in order,
  and checkpoints come in the order of the manifest's plan (step 0, every
  ``[evaluation] every`` steps, and the budget), ``E`` being ``[evaluation] episodes``.

A line counts once its line break is written, so a reader following a growing
file never takes half a line; a last line without a line break counts when the
file is complete. Every violation is a :class:`CurveFileError` naming the file,
the line and the column.
"""

from __future__ import annotations

import dataclasses
import math
import re
from collections.abc import Mapping, Sequence

from harness.core.curves import Checkpoint
from harness.core.errors import HarnessError

__all__ = [
    "CURVE_FILE_VERSION",
    "FORMAT_LINE",
    "HEADER",
    "SEEDED_HEADER",
    "CurveFileError",
    "CurveRow",
    "CurveAssembler",
    "LineParser",
    "curve_file_text",
    "parse_curve_text",
]

CURVE_FILE_VERSION = 1
FORMAT_LINE = f"# rlharness-curve {CURVE_FILE_VERSION}"
HEADER = "step,episode,return"
SEEDED_HEADER = "seed,step,episode,return"

_INTEGER = re.compile(r"[0-9]+\Z")
_DECIMAL = re.compile(r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?\Z")
_NON_FINITE = re.compile(r"[+-]?(?:nan|inf|infinity)\Z", re.IGNORECASE)
_LABEL = re.compile(r"[0-9]+(?:/[0-9]+)*\Z")


class CurveFileError(HarnessError, ValueError):
    """A curve file breaks the format; the message starts with ``file:line:column:``."""

    def __init__(self, message: str, *, file: str, line: int, column: int = 1):
        self.file, self.line, self.column = file, line, column
        super().__init__(f"{file}:{line}:{column}: {message}")


@dataclasses.dataclass(frozen=True, slots=True)
class CurveRow:
    """One evaluation episode read from a curve file, with the line and columns it came from."""

    line: int
    step: int
    episode: int
    value: float
    seed: str | None = None
    columns: tuple[int, ...] = ()


class LineParser:
    """Parse a curve file's text as it grows: feed chunks, get the rows of complete lines.

    Parameters
    ----------
    where
        The file's name for error messages.
    seeded
        ``False``: the header must be ``step,episode,return``; ``True``: ``seed,step,episode,return``;
        ``None``: either (then :attr:`seeded` tells which, once the header is read).
    """

    def __init__(self, where: str, *, seeded: bool | None = False):
        self.where = where
        self.seeded = seeded
        self._pending = b""
        self._line = 0

    def feed(self, chunk: bytes) -> list[CurveRow]:
        """Rows of every line completed by ``chunk`` (a partial last line waits for more)."""
        data = self._pending + chunk
        *lines, self._pending = data.split(b"\n")
        return [row for raw in lines if (row := self._parse(raw)) is not None]

    def close(self) -> list[CurveRow]:
        """The file is complete: parse a last line left without a line break; check the header was there."""
        rows = []
        if self._pending:
            raw, self._pending = self._pending, b""
            row = self._parse(raw)
            rows = [row] if row is not None else []
        if self._line < 2:
            expected = FORMAT_LINE if self._line == 0 else self._header_text()
            raise CurveFileError(f"the file ends before line {self._line + 1}, which must be {expected!r}",
                                 file=self.where, line=self._line + 1)
        return rows

    def _header_text(self) -> str:
        return {False: HEADER, True: SEEDED_HEADER, None: f"{HEADER} or {SEEDED_HEADER}"}[self.seeded]

    def _parse(self, raw: bytes) -> CurveRow | None:
        self._line += 1
        line = self._line
        if raw.endswith(b"\r"):
            raw = raw[:-1]
        try:
            text = raw.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise CurveFileError(f"is not UTF-8 text ({exc.reason} at byte {exc.start + 1})",
                                 file=self.where, line=line, column=exc.start + 1) from None
        if line == 1:
            if text != FORMAT_LINE:
                raise CurveFileError(f"the first line must be exactly {FORMAT_LINE!r} (the format and its version), "
                                     f"got {text[:60]!r}", file=self.where, line=1)
            return None
        if line == 2:
            allowed = {False: (HEADER,), True: (SEEDED_HEADER,), None: (HEADER, SEEDED_HEADER)}[self.seeded]
            if text not in allowed:
                raise CurveFileError(f"the header must be exactly {' or '.join(map(repr, allowed))}, got {text[:60]!r}",
                                     file=self.where, line=2)
            self.seeded = text == SEEDED_HEADER
            return None
        return self._row(text, line)

    def _row(self, text: str, line: int) -> CurveRow:
        fields = text.split(",")
        names = SEEDED_HEADER.split(",") if self.seeded else HEADER.split(",")
        columns, column = [], 1
        for field in fields:
            columns.append(column)
            column += len(field) + 1
        if len(fields) != len(names):
            what = "an empty line" if not text else f"{len(fields)} fields"
            column = columns[len(names)] if len(fields) > len(names) else len(text) + 1
            raise CurveFileError(f"expected {len(names)} fields ({','.join(names)}), got {what}",
                                 file=self.where, line=line, column=column)
        values = dict(zip(names, fields, strict=True))
        at = dict(zip(names, columns, strict=True))
        for name in ("step", "episode"):
            if not _INTEGER.match(values[name]):
                raise CurveFileError(f"{name} must be a non-negative integer written in digits, got {values[name]!r}",
                                     file=self.where, line=line, column=at[name])
        if self.seeded and not _LABEL.match(values["seed"]):
            raise CurveFileError(f"seed must be a seed label such as 3 or 2026/0, got {values['seed']!r}",
                                 file=self.where, line=line, column=at["seed"])
        value = values["return"]
        if _NON_FINITE.match(value):
            raise CurveFileError(f"non-finite evaluation return ({value}); every return must be a finite number",
                                 file=self.where, line=line, column=at["return"])
        if not _DECIMAL.match(value):
            raise CurveFileError(f"return must be a decimal number such as -3, 0.25 or 1e-3, got {value!r}",
                                 file=self.where, line=line, column=at["return"])
        number = float(value)
        if not math.isfinite(number):
            raise CurveFileError(f"return {value} overflows a 64-bit float", file=self.where, line=line, column=at["return"])
        return CurveRow(line, int(values["step"]), int(values["episode"]), number,
                        values["seed"] if self.seeded else None, tuple(columns))


class CurveAssembler:
    """Turn rows into checkpoints against a plan, checking steps and episode counts as they arrive.

    Parameters
    ----------
    where
        The file's name for error messages.
    steps
        The planned checkpoint steps, in order.
    episodes
        Evaluation episodes per checkpoint.
    """

    def __init__(self, where: str, steps: Sequence[int], episodes: int):
        self.where, self.steps, self.episodes = where, tuple(steps), episodes
        self.done: list[Checkpoint] = []
        self._returns: list[float] = []
        self._last_line = 2

    def add(self, row: CurveRow) -> Checkpoint | None:
        """Take one row; return the checkpoint it completes, if any."""
        self._last_line = row.line
        n = len(self.done)
        step_col = row.columns[-3] if row.columns else 1
        episode_col = row.columns[-2] if row.columns else 1
        if n == len(self.steps) and row.step != self.steps[-1]:
            raise CurveFileError(f"a row at step {row.step} after the last planned checkpoint (plan {list(self.steps)})",
                                 file=self.where, line=row.line, column=step_col)
        expected = self.steps[min(n, len(self.steps) - 1)]
        if not self._returns and self.done and row.step == self.done[-1].step:
            raise CurveFileError(f"step {row.step} has more than {self.episodes} evaluation episodes, the manifest "
                                 f"declares {self.episodes}", file=self.where, line=row.line, column=step_col)
        if row.step != expected:
            if self._returns and row.step in self.steps:
                raise CurveFileError(f"step {expected} has {len(self._returns)} evaluation episodes, "
                                     f"the manifest declares {self.episodes}", file=self.where, line=row.line, column=step_col)
            raise CurveFileError(f"step {row.step} is not the next planned checkpoint {expected} "
                                 f"(plan {list(self.steps)})", file=self.where, line=row.line, column=step_col)
        if row.episode != len(self._returns):
            raise CurveFileError(f"episode {row.episode} at step {row.step}, expected episode {len(self._returns)} "
                                 "(episodes are numbered 0, 1, ... in order)", file=self.where, line=row.line,
                                 column=episode_col)
        self._returns.append(row.value)
        if len(self._returns) < self.episodes:
            return None
        checkpoint = Checkpoint(row.step, tuple(self._returns))
        self.done.append(checkpoint)
        self._returns = []
        return checkpoint

    def finish(self) -> tuple[Checkpoint, ...]:
        """The file is complete: every planned checkpoint must be there."""
        if len(self.done) < len(self.steps):
            n = len(self.done)
            if self._returns:
                what = (f"step {self.steps[n]} has {len(self._returns)} evaluation episodes, "
                        f"the manifest declares {self.episodes}")
            else:
                what = f"the curve ends after {n} of {len(self.steps)} planned checkpoints (plan {list(self.steps)})"
            raise CurveFileError(what, file=self.where, line=self._last_line + 1)
        return tuple(self.done)


def parse_curve_text(data: bytes, where: str, *, steps: Sequence[int], episodes: int,
                     seeds: Sequence[str] | None = None) -> dict[str | None, tuple[Checkpoint, ...]]:
    """Read a complete curve file: checkpoints per seed label (key ``None`` for a one-seed file).

    Parameters
    ----------
    data
        The file's bytes.
    where
        Its name for error messages.
    steps, episodes
        The manifest's checkpoint plan and episodes per checkpoint.
    seeds
        The planned seed labels, to accept a file with a seed column; ``None`` allows only
        the one-seed header.

    Raises
    ------
    CurveFileError
        Anything off the format or the plan, naming the file, line and column.
    """
    parser = LineParser(where, seeded=None if seeds is not None else False)
    assemblers: dict[str | None, CurveAssembler] = {}
    for row in [*parser.feed(data), *parser.close()]:
        if row.seed is not None and row.seed not in seeds:
            raise CurveFileError(f"seed {row.seed!r} is not planned by the manifest (seeds {', '.join(seeds)})",
                                 file=where, line=row.line, column=1)
        assembler = assemblers.get(row.seed)
        if assembler is None:
            assembler = assemblers[row.seed] = CurveAssembler(where, steps, episodes)
        assembler.add(row)
    if not assemblers:
        raise CurveFileError("the file holds no evaluation rows", file=where, line=3)
    return {seed: assembler.finish() for seed, assembler in assemblers.items()}


def curve_file_text(curves: Mapping[str | None, Sequence[Checkpoint]]) -> str:
    """A curve file's text: ``{None: checkpoints}`` for one seed, ``{label: checkpoints, ...}`` with a seed column.

    Returns are written with ``repr`` (the shortest round-trip form), so reading them back
    gives the same floats bit for bit.
    """
    seeded = list(curves) != [None]
    lines = [FORMAT_LINE, SEEDED_HEADER if seeded else HEADER]
    for seed, checkpoints in curves.items():
        prefix = f"{seed}," if seeded else ""
        lines += [f"{prefix}{cp.step},{episode},{value!r}" for cp in checkpoints for episode, value in enumerate(cp.returns)]
    return "\n".join(lines) + "\n"
