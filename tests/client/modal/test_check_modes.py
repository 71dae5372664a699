"""The quick-look check with the modal fit: peaks that hold more than one mode, and what a
single-reference test cannot tell.

Source: the captured panel's truth (a simply supported plate, Leissa, Vibration of Plates,
NASA SP-160, 1969): modes (3, 2) and (4, 1) at 364.3 and 369.3 Hz, a close pair, and the
repeated root (3, 4) = (6, 2) at 910.6 Hz with (5, 3) beside it at 915.7 Hz.
"""

from __future__ import annotations

import dataclasses

from taprig.client.check import CheckSettings, check, report_text

from ..conftest import Captured


def test_check_names_the_peaks_that_hold_several_modes(captured_panel: Captured) -> None:
    data, truth = captured_panel.data, captured_panel.truth
    result = check(data)
    assert result.fitted is not None
    merged = {round(peak): modes for peak, modes in result.fitted.merged}
    pair = [f for f in truth.freqs_hz if 360.0 < f < 372.0]
    triple = [f for f in truth.freqs_hz if 905.0 < f < 920.0]
    assert len(pair) == 2 and len(triple) == 3
    near = {k: v for k, v in merged.items() if 360 <= k <= 372}
    assert [len(v) for v in near.values()] == [2], merged
    near = {k: v for k, v in merged.items() if 905 <= k <= 920}
    assert [len(v) for v in near.values()] == [3], merged
    text = report_text(result)
    assert "holds 3 modes: 910.6, 910.6, 915.7 Hz" in text
    assert result.to_dict()["fitted"]["n_modes"] == result.fitted.n_modes
    assert check(data, CheckSettings(fit_modes=False)).fitted is None


def test_single_reference_check_says_a_repeated_root_is_hidden(captured_panel: Captured) -> None:
    data = captured_panel.data
    first = tuple(r[:1] for r in data.response_points)
    one = dataclasses.replace(data, h1=data.h1[:, :1], h2=data.h2[:, :1],
                              coherence=data.coherence[:, :1], gxx=data.gxx[:, :1],
                              responses=data.responses[:1], response_points=first)  # fmt: skip
    text = report_text(check(one))
    assert "one reference: a repeated root (two modes at one frequency) cannot be told" in text
