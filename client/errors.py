"""The client's exception tree: one base class, mapped to exit codes in the CLI only.

ClientError → exit 1 (a rig or transfer problem), MirrorError → 3 (the local mirror),
PairingError → 2 (no usable pairing: unknown rig, no token, bad pairing address),
FitError → 4 (a modal fit the data cannot carry).
"""

from __future__ import annotations


class ClientError(Exception):
    """Anything the client can explain to its user in one sentence."""

    exit_code = 1


class PairingError(ClientError):
    """No paired rig fits the request, or a pairing address is not usable."""

    exit_code = 2


class MirrorError(ClientError):
    """The local mirror cannot be read or written, or does not fit the rig it mirrors."""

    exit_code = 3


class FitError(ClientError):
    """A modal fit the data cannot carry: too few points, no lines, no modes, bad orders."""

    exit_code = 4
