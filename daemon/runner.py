"""Start-up and shut-down of a whole rig, in order: instrument (if virtual), store, rig.

Parts start in the order listed and stop in reverse; every close is idempotent.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

from .config import Config
from .rig import Rig
from .store import Store
from .wirebody import encode_body

if TYPE_CHECKING:  # the simulator is imported only when a virtual device is configured
    from taprig.firmware_protocol.virtual import ModalModel
    from taprig.firmware_protocol.virtual.instrument import InstrumentSettings, VirtualInstrument

log = logging.getLogger(__name__)


@dataclass
class RunningRig:
    config: Config
    store: Store
    rig: Rig
    instrument: VirtualInstrument | None = None
    _closed: bool = field(default=False, repr=False)

    def close(self) -> None:
        if self._closed:
            return
        self._closed = True
        self.rig.close()
        self.store.close()
        if self.instrument is not None:
            self.instrument.close()


def start_rig(
    config: Config,
    instrument_settings: InstrumentSettings | None = None,
    model: ModalModel | None = None,
) -> RunningRig:
    """Open everything the configuration names and start capturing.

    instrument_settings, model: for a virtual device, how to build it (default: the demo panel).
    """
    instrument = None
    url = config.device.url
    if config.device.is_virtual:
        from taprig.firmware_protocol.virtual.instrument import InstrumentSettings, open_virtual

        transport = "tcp" if url == "virtual:tcp" else "pty"
        # A board printing text lines manages a few kHz, not the binary link's 51.2 kHz.
        settings = instrument_settings or (
            InstrumentSettings(output="text", rate_hz=5_000.0)
            if url == "virtual:text"
            else InstrumentSettings()
        )
        # Behind a stable name in the data folder, as udev gives a USB device, so the
        # link finds it again after an unplug.
        link = str(config.store.data_dir / "virtual-tty") if transport == "pty" else None
        config.store.data_dir.mkdir(parents=True, exist_ok=True)
        instrument = open_virtual(transport, link=link, settings=settings, model=model)
        url = instrument.url
        log.info("virtual instrument on %s", url)
    try:
        store = Store(config.store.data_dir, body_encoder=encode_body)
    except Exception:
        if instrument is not None:
            instrument.close()
        raise
    rig = Rig(config, store, url=url).start()
    return RunningRig(config, store, rig, instrument)
