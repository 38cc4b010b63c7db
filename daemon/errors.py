"""One error tree for the daemon, split by where things went wrong.

RigError
 ├── LinkError          the port is gone or cannot be opened (unplugged, wrong path)
 ├── DeviceTimeout      a device did not answer in time (also a TimeoutError)
 └── DeviceRejected     a device answered a command with an error code
ConfigError             a setting is missing or out of range (names file, key and line)
RunRequestError         a start/stop request that cannot be honoured now

Kept beside the code that raises them: StoreError (daemon.store.writer: the database takes no more writes),
PlanError (daemon.controller: a run plan value, with its key), RequestError (daemon.api: a request refused,
sent back to the client as its error text), TransitionError (daemon.controller: a bug, never an operator's),
RunCsvError (daemon.runcsv: a run CSV, by line and column), LoggerImportError and MapError (daemon.logger_import:
a logger's export by line and column, a mapping file by key and line).
"""

from __future__ import annotations


class RigError(Exception):
    """Something between the daemon and the wires failed."""


class LinkError(RigError):
    """The transport is closed or broken. Check the cable and the port name."""


class DeviceTimeout(RigError, TimeoutError):
    """No reply in time. Check power to the device and the baud rate."""


class DeviceRejected(RigError):
    """The device refused a command; ``code`` is its reason."""

    def __init__(self, command: str, code: str) -> None:
        super().__init__(f"device refused {command}: {code}")
        self.command = command
        self.code = code


class ConfigError(ValueError):
    """A configuration value is wrong; the message names file, key and line."""


class RunRequestError(ValueError):
    """A request that cannot be carried out in the current state."""
