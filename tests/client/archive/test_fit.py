"""`taprig fit --archive DSN [--keep]` as a user runs it: a real process reading a test the
archive followed from a real rig, and keeping the fitted model beside it.

The test is the known model of tests/client/modal/synthetic.py committed through the rig's
store, so the expected modes are the model's own (Ewins, Modal Testing, 2000, §2.3).
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from pathlib import Path

import numpy as np

from taprig.client.archive import Archive, get_model
from taprig.client.modal import ModalModel

from ..conftest import ServedRig
from ..modal.synthetic import FREQ_HZ, known_data
from ..modal.test_cli_fit import commit_test
from .conftest import follow_once
from .test_cli import ok, taprig


def test_fit_reads_the_archive_and_keeps_the_model_there(
    archive_dsn: str, rigs: Callable[[int], list[ServedRig]], tmp_path: Path
) -> None:
    """The six modes come back from the archived test to 1e-6 (the model's own frequencies);
    with --keep the archive holds the model's npz bytes under their SHA-256, and they read
    back as the model the command printed. Without --archive, --keep is refused."""
    (served,) = rigs(1)
    _, data = known_data(0.5)
    commit_test(served.running, "beam", data)
    follow_once(archive_dsn, [served])
    served.loop.close()  # the fit needs the archive only, not the rig
    home = tmp_path / "home"
    plain = ok(taprig(home, "fit", "beam", "--band", "20:800", "--archive", archive_dsn,
                      "--json"))  # fmt: skip
    assert np.allclose([m["freq_hz"] for m in plain["modes"]], FREQ_HZ, rtol=1e-6)
    assert plain["archived"] is None
    with Archive(archive_dsn) as archive:
        assert archive.rows("SELECT count(*) FROM modal_models") == [(0,)]
    kept = ok(taprig(home, "fit", "beam", "--band", "20:800", "--archive", archive_dsn,
                     "--keep", "--json"))  # fmt: skip
    with Archive(archive_dsn) as archive:
        stored = get_model(archive, "beam")
    assert kept["archived"]["sha256"] == stored.digest == hashlib.sha256(stored.body).hexdigest()
    assert (kept["archived"]["rig_id"], stored.rig_id) == (served.rig_id, served.rig_id)
    assert [m["freq_hz"] for m in stored.summary["modes"]] == [m["freq_hz"] for m in kept["modes"]]
    (tmp_path / "kept.npz").write_bytes(stored.body)
    model = ModalModel.load(tmp_path / "kept.npz")
    assert np.allclose(model.freq_hz, FREQ_HZ, rtol=1e-6) and model.shape.shape == (6, 12)
    text = taprig(home, "fit", "beam", "--archive", archive_dsn, "--band", "20:800", "--keep")
    assert text.returncode == 0 and "kept in the archive" in text.stdout, text.stderr
    refused = taprig(home, "fit", "beam", "--keep")
    assert refused.returncode == 1 and "add --archive DSN" in refused.stderr
    assert "Traceback" not in refused.stderr
    missing = taprig(home, "fit", "no-such", "--archive", archive_dsn, "--keep")
    assert missing.returncode == 4 and "no test 'no-such'" in missing.stderr
