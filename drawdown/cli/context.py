"""What every command needs: where the store and the system description are."""

from __future__ import annotations

import json
import os
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from platformdirs import user_data_dir

if TYPE_CHECKING:  # pydantic loads with the first command that reads system.toml, not with --help
    from drawdown.analysis.system import System


class UsageError(Exception):
    """Bad input or usage: the command exits 2 with this message."""


def default_store_path() -> Path:
    env = os.environ.get("DRAWDOWN_STORE")
    if env:
        return Path(env)
    return Path(user_data_dir("drawdown", appauthor=False)) / "readings.sqlite"


@dataclass
class Context:
    store_path: Path
    system_path: Path

    @classmethod
    def from_args(cls, args: Any) -> Context:
        store = Path(args.store) if getattr(args, "store", None) else default_store_path()
        system = Path(args.system) if getattr(args, "system", None) else store.parent / "system.toml"
        return cls(store_path=store, system_path=system)

    def open_store(self, **kw: Any):
        from drawdown.collector.store import Store, StoreError

        try:
            return Store(self.store_path, **kw)
        except StoreError as exc:
            raise UsageError(str(exc)) from None

    def has_system(self) -> bool:
        return self.system_path.exists()

    def load_system(self) -> System:
        """Read and validate system.toml; UsageError naming the file and key otherwise."""
        from drawdown.analysis.system import SystemError_, decode_system_bytes, parse_system

        try:
            raw = self.system_path.read_bytes()
        except FileNotFoundError:
            raise UsageError(
                f"{self.system_path}: no system description. Write one (see README: 'Describe your system')"
                " or pass --system PATH.") from None
        except IsADirectoryError:
            raise UsageError(f"{self.system_path}: is a folder; --system names the system.toml file") from None
        except OSError as exc:
            raise UsageError(f"{self.system_path}: cannot read the system description "
                             f"({exc.strerror or exc})") from None
        try:
            text = decode_system_bytes(raw, source=str(self.system_path))
            return parse_system(text, source=str(self.system_path))
        except SystemError_ as exc:
            raise UsageError(str(exc)) from None


def print_json(obj: Any) -> None:
    """The one JSON object a --json command prints on stdout."""
    # Encode first, then write: a failure half-way must not leave half an object on stdout.
    text = json.dumps(_clean(obj), indent=2, default=_json_default, allow_nan=False)
    sys.stdout.write(text + "\n")


def _clean(obj: Any) -> Any:
    """NaN/inf become null: JSON has no NaN, and a missing value is null by contract."""
    import math

    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if hasattr(obj, "__dataclass_fields__"):
        import dataclasses

        return _clean(dataclasses.asdict(obj))
    return obj


def _json_default(obj: Any) -> Any:
    import numpy as np
    import pandas as pd

    if isinstance(obj, (pd.Timestamp,)):
        return obj.isoformat()
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.floating):
        return None if not np.isfinite(obj) else float(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, Path):
        return str(obj)
    if hasattr(obj, "isoformat"):
        return obj.isoformat()
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")


def warn(msg: str) -> None:
    print(msg, file=sys.stderr)
