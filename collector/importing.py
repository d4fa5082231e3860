"""One entry for importing a log file: the right importer for its format.

``drawdown import``, the dashboard's upload and :func:`drawdown.import_log` all call
:func:`import_log`, so a file imports the same way from every face.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from drawdown.collector.csv_file import ImportResult, import_file
from drawdown.collector.parquet_file import import_parquet, is_parquet
from drawdown.collector.store import Store


def importer_for(path: Path) -> Any:
    """:func:`~collector.parquet_file.import_parquet` for Parquet (``PAR1`` magic bytes or a
    ``.parquet`` name), else the delimited-text importer :func:`~collector.csv_file.import_file`."""
    return import_parquet if is_parquet(Path(path)) else import_file


def import_log(path: Path, store: Store, **options: Any) -> ImportResult:
    """Import ``path`` into ``store`` with the importer for its format (the options of ``import_file``)."""
    return importer_for(Path(path))(Path(path), store, **options)
