"""Errors of the central store, split by what the user does about them.

CentralError             base; ``exit_code`` is what a command returns for it
 ├── CentralUnreachable  the server cannot be reached or the connection dropped: try again later (exit 3)
 ├── CentralBusy         another sync of the same store holds it: try again later (exit 3)
 ├── CentralRefused      the server said no: wrong role, another rig's name or store, no privilege (exit 2)
 └── CentralSchemaError  the central schema is missing, too old or too new for this linerig (exit 2)
LocalStoreError          the rig's SQLite file cannot be read for a push (exit 2)
"""

from __future__ import annotations

EXIT_BAD_INPUT = 2
EXIT_TRY_LATER = 3


class CentralError(RuntimeError):
    exit_code = EXIT_BAD_INPUT


class CentralUnreachable(CentralError):
    exit_code = EXIT_TRY_LATER


class CentralBusy(CentralError):
    exit_code = EXIT_TRY_LATER


class CentralRefused(CentralError):
    pass


class CentralSchemaError(CentralError):
    pass


class LocalStoreError(CentralError):
    pass
