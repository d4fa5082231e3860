"""Progress bars for the long commands: on stderr, only on a terminal, silenced by ``--quiet``.

stdout belongs to a command's result (one JSON object with ``--json``), so a bar never
writes there; a pipe, a log file or a CI run sees no bar at all.
"""

from __future__ import annotations

import sys
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

#: Set by ``drawdown --quiet``: no bar on any command.
QUIET = False


def shown() -> bool:
    """Whether a bar would be drawn: stderr is a terminal and ``--quiet`` was not given."""
    return not QUIET and sys.stderr.isatty()


def bar(total: float, desc: str, *, unit: str = "it", scale: bool = False) -> Any:
    """A tqdm bar on stderr (disabled off a terminal or with ``--quiet``); use as a context manager.

    ``scale`` shows byte counts as kB/MB (``unit="B"``).
    """
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, unit=unit, unit_scale=scale, unit_divisor=1024 if scale else 1000,
                file=sys.stderr, disable=not shown(), leave=False, dynamic_ncols=True)


@contextmanager
def stages(desc: str, names: list[str]) -> Iterator[Any]:
    """A bar over named steps; call the yielded ``step(name)`` as each one starts."""
    with bar(len(names), desc, unit="step") as b:
        started: list[str] = []

        def step(name: str) -> None:
            if started:
                b.update(1)
            started.append(name)
            b.set_postfix_str(name, refresh=True)

        yield step
        b.update(len(names) - b.n)


class ByteBar:
    """A bar over a file's bytes for an importer's ``progress(done, total)`` callback; ``close()`` it.

    Files under ``min_bytes`` get no bar (they are done before one would help).
    """

    def __init__(self, label: str, total: int, *, min_bytes: int = 0) -> None:
        self._bar = bar(total, label, unit="B", scale=True) if total >= min_bytes else None

    def __call__(self, done: int, total: int) -> None:
        if self._bar is not None:
            self._bar.update(max(done - self._bar.n, 0))

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()
