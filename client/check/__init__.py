"""The quick-look check: is this test's data good enough to take home? (Not a modal fitter.)

Entry points: ``check(data, settings=CheckSettings()) -> CheckResult`` on a `TestData`
(client/dataset.py); ``report_text(result) -> str`` for check.txt; ``result.to_dict()`` for
``--json``. Pure numpy: no HTTP, no SQLite, no plotting.

The modules, in the order the check runs:

    settings.py     CheckSettings: the thresholds
    results.py      PointCheck, ModePeak, DrivingPointCheck, CheckResult
    run.py          check(): the analysis band, then each step below; analysis_band()
    points.py       per point: averages, rejections, coherence, force band, flags
    peaks.py        peak picking: prominences, the peak rule, half-power widths
    mode_peaks.py   the modes: peaks of the summed |H1|, Q, the window's share, shapes
    driving.py      driving points: Im A at resonance, anti-resonances between
    report.py       report_text(): check.txt

Fitted modes (`FittedView`, client/check_modes.py, unless ``fit_modes`` is off): the
test's modes by pLSCF and LSFD (client/modal/), set against the peaks: the peaks that hold
more than one mode (a close pair, a repeated root), the modes no peak shows, and, for a
single-reference test, that a repeated root cannot be told from a single mode.
"""

from .peaks import half_power, peak_prominences, pick_peaks
from .report import report_text
from .results import CheckResult, DrivingPointCheck, ModePeak, PointCheck
from .run import analysis_band, check
from .settings import CheckSettings

__all__ = [
    "CheckResult",
    "CheckSettings",
    "DrivingPointCheck",
    "ModePeak",
    "PointCheck",
    "analysis_band",
    "check",
    "half_power",
    "peak_prominences",
    "pick_peaks",
    "report_text",
]
