"""Free disk for the store: whether there is room to capture, in words for the operator."""

from __future__ import annotations

import logging
import shutil
from pathlib import Path

log = logging.getLogger(__name__)


class Room:
    """The free space of `folder` against `min_free_mb` (MB, 10^6 bytes)."""

    def __init__(self, folder: Path, min_free_mb: int) -> None:
        self.folder, self.min_free_mb = folder, min_free_mb
        self.free_mb: float | None = None
        """Free space at the last look, MB; None before the first."""
        self._unreadable = False

    def low(self) -> bool:
        """Look now (updates `free_mb`); True below `min_free_mb`. OSError if unreadable."""
        self.free_mb = shutil.disk_usage(self.folder).free / 1e6
        return self.free_mb < self.min_free_mb

    def look(self) -> bool | None:
        """`low()`, or None when the folder cannot be read (logged once, then at DEBUG)."""
        try:
            low = self.low()
        except OSError as exc:  # the folder vanished or the disk failed: say so once, go on
            level = logging.DEBUG if self._unreadable else logging.WARNING
            log.log(level, "cannot read the free space of %s: %s", self.folder, exc)
            self._unreadable = True
            return None
        self._unreadable = False
        return low

    def shortage(self) -> str:
        return (f"only {self.free_mb or 0.0:.0f} MB free in {self.folder}; "
                f"the rig needs {self.min_free_mb} MB")  # fmt: skip

    def plenty(self) -> str:
        return f"{self.free_mb or 0.0:.0f} MB free in {self.folder}"
