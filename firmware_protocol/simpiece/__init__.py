"""The simulated test piece: a tap-test rig in software, used by the tests and the demo."""

from .modal import (
    DEMO_DRIVING_POINT,
    ModalModel,
    demo_panel,
    load_truth,
    simply_supported_plate,
    truth_dict,
    write_truth,
)
from .response import accelerance, half_sine, half_sine_spectrum, modal_acceleration

__all__ = [
    "DEMO_DRIVING_POINT",
    "ModalModel",
    "accelerance",
    "demo_panel",
    "half_sine",
    "half_sine_spectrum",
    "load_truth",
    "modal_acceleration",
    "simply_supported_plate",
    "truth_dict",
    "write_truth",
]
