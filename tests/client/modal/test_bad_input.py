"""Data a fit cannot carry gets a FitError that says what to change, and keeps the data.

The data are the known model's exact FRFs (tests/client/modal/synthetic.py), spoiled on
purpose; nothing numerical is checked here but what is reported.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from taprig.client.errors import ClientError, FitError
from taprig.client.modal import fit

from ..analytic import analytic_test_data
from .synthetic import BAND_HZ, FREQ_HZ, LINES_HZ, known_data


def test_one_point_is_refused() -> None:
    model, _ = known_data()
    one = analytic_test_data(model, LINES_HZ, 0.5, points=("G1",))
    with pytest.raises(FitError, match="1 measured point; a mode shape needs at least 2"):
        fit(one, band=BAND_HZ)


def test_a_few_nan_lines_are_left_out_and_many_are_refused() -> None:
    """Lines holding NaN in any FRF are left out of the fit (the rest still gives the
    model's frequencies, source: the model); more than half the band refused, by name."""
    _, data = known_data()
    h1 = data.h1.copy()
    h1[4, 1, 100:110] = np.nan
    before = h1.copy()
    m = fit(dataclasses.replace(data, h1=h1), band=BAND_HZ, orders=(4, 24))
    assert np.allclose(m.freq_hz, FREQ_HZ, rtol=1e-6)
    assert np.array_equal(np.isnan(h1), np.isnan(before))  # the caller's data untouched
    h1[0, 0, 50:1500] = np.nan
    with pytest.raises(FitError, match=r"lines in 20:800 Hz hold NaN or inf"):
        fit(dataclasses.replace(data, h1=h1), band=BAND_HZ)


def test_band_without_lines_or_modes_and_too_high_orders() -> None:
    _, data = known_data()
    with pytest.raises(FitError, match="holds no frequency line"):
        fit(data, band=(5000.0, 6000.0))
    with pytest.raises(FitError, match="no stable mode in 850:990 Hz"):
        fit(data, band=(850.0, 990.0))
    with pytest.raises(FitError, match=r"orders up to 60 .* need at least 122 lines"):
        fit(data, band=(100.0, 110.0), orders=(4, 60))
    with pytest.raises(FitError, match=r"orders 0:10"):
        fit(data, band=BAND_HZ, orders=(0, 10))
    with pytest.raises(ValueError, match=r"--pick 333 Hz: no stable pole within 5 %"):
        fit(data, band=BAND_HZ, orders=(4, 24), pick=[333.0])


def test_fit_errors_are_client_errors_with_their_own_exit_code() -> None:
    assert issubclass(FitError, ClientError) and FitError.exit_code == 4


def test_zero_coherence_everywhere_is_named() -> None:
    _, data = known_data()
    silent = dataclasses.replace(data, coherence=np.zeros_like(data.coherence))
    with pytest.raises(FitError, match="are the coherences of some point zero"):
        fit(silent, band=BAND_HZ)
