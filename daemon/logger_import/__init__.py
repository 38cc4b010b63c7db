"""Logger exports to run CSVs: delimited text from any data logger, read with every choice stated.

``import_file(path, read_map(map_path))`` gives an ``Imported``: the run (``RunData``, the reduction's own shape)
and the list of choices made, each with the map key that would change it. Pure apart from reading the file.
The rules live beside the code that applies them: the layout (``layout``), numbers (``numbers``), time
(``clock``), units (``units``), which column is what (``roles``), heater on and power per metre (``heater``).
docs/logger-import.md describes them for users.
"""

from .convert import Imported, import_file, import_logger
from .errors import Choice, LoggerImportError, MapError
from .mapping import LoggerMap, parse_map, read_map

__all__ = ["Choice", "Imported", "LoggerImportError", "LoggerMap", "MapError", "import_file", "import_logger",
           "parse_map", "read_map"]
