"""The mode GIFs share one figure between modes: what one mode's GIF shows must not depend
on which modes were drawn on that figure before it.

Each GIF written on the shared figure (`_Movie`, as `write_mode_pictures` uses it) is compared
byte for byte with the same mode's GIF drawn on a figure of its own (`_gif`), for real modes
of the simulated panel and for a complex shape (a travelling component, as a fitted mode with
MPC below 1 has), drawn after the others.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from PIL import Image

from taprig.client.view import pictures
from taprig.client.view.geometry import from_grid
from taprig.client.view.payload import normalise, spread

from .conftest import Known

FRAMES = 6  # enough to compare; the frame count is the caller's


def test_a_shared_figure_draws_each_mode_as_its_own_would(known: Known, tmp_path: Path) -> None:
    data, modes = known.data, known.modes
    geometry = from_grid(data.grid)
    shapes = normalise(spread(modes.shape, modes.point, geometry))
    travelling = normalise((shapes[1] + 0.4j * shapes[2])[None, :])[0]
    order = [(2, shapes[2]), (0, shapes[0]), (1, travelling), (2, shapes[2])]
    movie = pictures._Movie(data, modes, geometry, shapes[0])
    for n, (m, phi) in enumerate(order):
        shared = movie.write(phi, m, tmp_path / f"shared-{n}.gif", FRAMES)
        alone = pictures._gif(data, modes, geometry, phi, m, tmp_path / f"alone-{n}.gif", FRAMES)
        assert shared.read_bytes() == alone.read_bytes(), (n, m)
        with Image.open(shared) as gif:
            assert gif.n_frames == FRAMES
    # Not one picture for every mode: the modes drawn differ.
    seen = []
    for n in (0, 1):
        with Image.open(tmp_path / f"shared-{n}.gif") as gif:
            seen.append(np.asarray(gif.convert("RGB")))
    assert (seen[0] != seen[1]).any()
