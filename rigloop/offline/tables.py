"""Trial tables: CSV import through a column mapping, and CSV/JSONL export from the store.

The work is split by job; this module keeps the names at their old path:

  csv_cells.py  a cell's text -> a field's value (str, float, int, bool, auto, times)
  csv_map.py    the column mapping file (TOML) -> ColumnMap; MappingError
  csv_rows.py   CSV rows -> TrialEvents, all or nothing: parse_csv, read_events; RowProblem, CsvRejected
  export.py     a store's trials, decisions or quantities -> CSV or JSONL

(Export stays in offline/ rather than outputs/: the two rooms sit in one layer and may
not import each other, and this path re-exports it.)
"""

from .csv_map import ColumnMap, CueSlot, MappingError, Source, load_mapping
from .csv_rows import CsvRejected, RowProblem, group_events, parse_csv, read_events
from .export import FORMATS, WHATS, export, export_text

__all__ = [
    "FORMATS",
    "WHATS",
    "ColumnMap",
    "CsvRejected",
    "CueSlot",
    "MappingError",
    "RowProblem",
    "Source",
    "export",
    "export_text",
    "group_events",
    "load_mapping",
    "parse_csv",
    "read_events",
]
