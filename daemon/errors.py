"""The daemon's exception tree: one base class, mapped to exit codes in the CLI.

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


class StoreError(TaprigError):
    """The point-set store cannot do what was asked; what it already holds is unchanged."""

    exit_code = 3


class DiskFullError(StoreError):
    """No room left to commit; nothing half-written is kept."""


class SessionError(TaprigError):
    """A session command that does not fit the current state (no test selected, unknown point)."""

    exit_code = 4


class DiskLowError(SessionError):
    """Too little free disk to arm; the wish is kept and the rig arms once there is room."""
