"""An optional extra that is missing is named with both ways to install it, as a process."""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path


def test_the_hdf5_hint_serves_a_checkout_user(tmp_path: Path) -> None:
    script = textwrap.dedent(f"""
        import sys
        sys.modules["h5py"] = None  # as if the hdf5 extra were not installed
        sys.path.insert(0, {str(Path(__file__).parents[2])!r})
        import numpy as np
        from tests.client.analytic import analytic_test_data
        from taprig.firmware_protocol.virtual import demo_panel
        from taprig.client.errors import ClientError
        from taprig.client.export import export
        data = analytic_test_data(demo_panel(1000.0), np.arange(0.0, 200.0, 1.0), 0.5)
        try:
            export(data, {str(tmp_path / "x.h5")!r}, "hdf5")
        except ClientError as exc:
            print(exc)
    """)
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                          timeout=120)  # fmt: skip
    assert done.returncode == 0, done.stderr
    assert "pip install 'taprig[hdf5]'" in done.stdout
    assert "in a checkout of taprig: pip install '.[hdf5]'" in done.stdout
