"""The daemon↔client contract: names and versions both sides must agree on.

`taprig.daemon` and `taprig.client` both import this module and never each other,
so a value here is the single definition of its part of the contract.

LAN advertisement (mDNS, RFC 6762; DNS-SD, RFC 6763)
----------------------------------------------------
A rig advertises one instance of `SERVICE_TYPE`:

- instance name: the rig's name, UTF-8. If another device on the LAN already
  holds that name, the rig takes ``name-2``, ``name-3``, ... and keeps running;
  a workstation tells rigs apart by ``id``, never by name.
- SRV: the port of the rig's HTTP service, on host ``taprig-<id>.local.``.
- A: the rig's addresses.
- TXT, values in UTF-8 text; keys are lower case, compared case-insensitively
  (RFC 6763 §6.4), and a reader ignores keys it does not know, so a key can be
  added without a new `API_VERSION`:

  ========  =======================================================  ============
  key       value                                                    present
  ========  =======================================================  ============
  ``api``   `API_VERSION` of the rig's HTTP service, decimal         always
  ``id``    the rig's stable id, 1..36 of ``0-9 a-z -``; it outlives always
            renames and restarts
  ``run``   ``1`` while a test is running, else ``0``                always
  ``test``  name of the current test, cut at a character boundary    while a test
            to keep the record small (a label for people; fetch the  is set
            full name over HTTP)
  ========  =======================================================  ============

  Every key is at most 9 characters (RFC 6763 §6.4) and the whole record at
  most 200 bytes (RFC 6763 §6.2); the advertiser refuses anything larger.
  The record is re-announced whenever ``run`` or ``test`` changes.
"""

from __future__ import annotations

from typing import Final

API_VERSION: Final = 1
"""Version of the rig's HTTP API; raised on any change a current client would misread."""

SERVICE_TYPE: Final = "_taprig._tcp.local."
"""DNS-SD service type of a rig (RFC 6763 §7; §7.2: the name part at most 15 characters)."""

TXT_API: Final = "api"
TXT_ID: Final = "id"
TXT_RUN: Final = "run"
TXT_TEST: Final = "test"

WARNING_CODES: Final = frozenset({"undecayed"})
"""Finding codes of a hit that warn without rejecting (every other code on a rejected hit is
a reason for rejecting it). Codes a reader does not know are counted as reasons."""
