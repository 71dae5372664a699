"""The daemon's exception tree: one base class, mapped to exit codes in the CLI
(daemon/cli.py, `_guard`) and to HTTP statuses in the service (daemon/api/errors.py).

A rejected tap is not an exception: it is a verdict with a reason code
(daemon/hits.py). These are for things that stop an operation.
"""

from __future__ import annotations


class TaprigError(Exception):
    """Base of every error the daemon raises on purpose; the message is for the operator."""

    exit_code = 1


class ConfigError(TaprigError):
    """A configuration key or value is wrong; the message names the key, the value and what is
    allowed. Stops start-up."""

    exit_code = 2


class GridError(TaprigError):
    """A grid CSV that cannot be read; the message names the line and the field."""

    exit_code = 2


class StoreError(TaprigError):
    """The point-set store cannot do what was asked; what it already holds is unchanged."""

    exit_code = 3


class AlreadyExists(StoreError):
    """A test of that name is stored already; nothing was written (HTTP 409)."""


class DiskFullError(StoreError):
    """No room left to commit; nothing half-written is kept."""


class SessionError(TaprigError):
    """A session command that does not fit the current state (no test selected, unknown point)."""

    exit_code = 4


class DiskLowError(SessionError):
    """Too little free disk to arm; the wish is kept and the rig arms once there is room."""


class NotFound(TaprigError):
    """What a command names does not exist: a test, a point set, a point of the grid
    (HTTP 404)."""

    exit_code = 5
