"""`taprig fit`: a mirrored or archived test's modes (client/modal/), as a table, JSON, a
file, plots (with a GIF of each mode moving, client/view/pictures.py); with
`--archive DSN --keep`, the model is also kept in the archive.

Registered on the command line by `register(app)` from client/cli.py, which shares its
load helper, option types, error guard and output helper with every other command. The
options are declared inside `register` so that this module never imports cli.py at import
time (cli.py imports this one).
"""

import math
from pathlib import Path
from typing import Annotated

import numpy as np
import typer

from .dataset import TestData
from .modal.model import ModalModel
from .words import count

__all__ = ["mode_table", "parse_orders", "parse_pick", "register"]

SHOW_AFTER_S = 1.0  # a fit that takes longer than this shows a progress bar
KeepOption = Annotated[
    bool, typer.Option("--keep", help="store the model in the archive (with --archive)")
]


def parse_orders(text: str | None) -> tuple[int, int] | None:
    """(N1, N2) of --orders N1:N2; ValueError naming it otherwise."""
    if text is None:
        return None
    lo, sep, hi = text.partition(":")
    try:
        orders = (int(lo), int(hi))
    except ValueError:
        orders = (0, 0)
    if not sep or not 1 <= orders[0] <= orders[1]:
        raise ValueError(f"--orders {text!r}: write N1:N2 with 1 <= N1 <= N2, e.g. 10:60")
    return orders


def parse_pick(text: str | None) -> list[float] | None:
    """Frequencies of --pick F,F,...; ValueError naming it otherwise."""
    if text is None:
        return None
    try:
        values = [float(v) for v in text.split(",")]
    except ValueError:
        values = [math.nan]
    if not values or not all(math.isfinite(v) and v > 0 for v in values):
        raise ValueError(f"--pick {text!r}: write positive frequencies in Hz, e.g. 65.8,126.5")
    return values


def mode_table(model: ModalModel) -> list[str]:
    """The model as lines of text: one row per mode, then the notes."""
    refs = " ".join(f"{r[:8]:>8}" for r in model.reference)
    lines = [
        f"{count(model.n_modes, 'mode')} of {model.meta.get('test', '?')} in "
        f"{model.meta['band_hz'][0]:.1f} to {model.meta['band_hz'][1]:.1f} Hz "
        f"(pLSCF orders {model.meta['orders'][0]}..{model.meta['orders'][1]}, LSFD); "
        f"scaling: {model.meta['scaling']}",
        f"  {'#':>3} {'f (Hz)':>9} {'zeta %':>7} {'windowed':>8} {'MPC':>5} {'synth %':>7} "
        f"{refs}  flags",
    ]
    share = np.abs(model.participation) ** 2
    share = share / np.maximum(share.sum(axis=1, keepdims=True), 1e-300)
    for k in range(model.n_modes):
        zeta = model.damping_ratio[k]
        z = f"{100.0 * zeta:7.3f}" if math.isfinite(zeta) else f"{'-':>7}"
        parts = " ".join(f"{v:8.2f}" for v in share[k])
        lines.append(
            f"  {k + 1:>3} {model.freq_hz[k]:9.2f} {z} {100 * model.damping_ratio_windowed[k]:8.3f}"
            f" {model.mpc[k]:5.2f} {100 * model.synthesis_error[k]:7.1f} {parts}  "
            + (" ".join(model.flags[k]) or "ok")
        )
    lines += [f"  note: {n}" for n in model.meta.get("notes", [])]
    return lines


def register(app: typer.Typer) -> None:
    """Add `fit` to the client's command line."""
    from .cliparts import (
        ArchiveOption,
        BandOption,
        JsonOption,
        RigOption,
        TestArgument,
        emit,
        guard,
        load_test,
        parse_band,
        progress_bar,
    )

    @app.command(name="fit")
    def fit_command(
        test: TestArgument,
        band: BandOption = None,
        orders: Annotated[
            str | None, typer.Option(help="model orders N1:N2 of the stabilization diagram")
        ] = None,
        pick: Annotated[
            str | None, typer.Option(help="take the modes nearest these Hz: F,F,... ")
        ] = None,
        out: Annotated[
            Path | None, typer.Option(help="write the modal model to FILE.npz or FILE.h5")
        ] = None,
        plots: Annotated[
            Path | None, typer.Option(help="draw PNG plots into this folder (plots extra)")
        ] = None,
        rig: RigOption = None,
        archive: ArchiveOption = None,
        keep: KeepOption = False,
        as_json: JsonOption = False,
    ) -> None:
        """Modes of a mirrored or archived test: frequency, damping, shape (pLSCF, LSFD)."""
        from .errors import ClientError
        from .modal import fit

        with guard():
            if keep and archive is None:
                raise ClientError("--keep stores the model in an archive: add --archive DSN")
            data = load_test(rig, test, archive)
            with progress_bar(as_json, "fitting", 1, SHOW_AFTER_S) as bar:
                model = fit(data, parse_band(band), parse_orders(orders), parse_pick(pick), bar)
            saved = model.save(out) if out is not None else None
            kept = _keep(archive, rig, test, model) if keep and archive is not None else None
            drawn: list[Path] = []
            if plots is not None:
                drawn = _draw(data, model, plots)
        obj = {**model.to_dict(), "file": None if saved is None else str(saved),
               "plots": [str(p) for p in drawn], "archived": kept}  # fmt: skip
        emit(as_json, obj, lambda: [*mode_table(model),
                                     *([f"model {saved}"] if saved else []),
                                     *([f"kept in the archive, made {kept['created_utc']}, "
                                        f"sha256 {kept['sha256'][:16]}"] if kept else []),
                                     *(f"plot {p}" for p in drawn)])  # fmt: skip


def _draw(data: TestData, model: ModalModel, folder: Path) -> list[Path]:
    """The fit's PNG plots, then each mode moving on the structure (GIF) and their sheet."""
    from .modal_plots import write_modal_plots
    from .view.pictures import write_model_pictures

    return [*write_modal_plots(model, folder), *write_model_pictures(data, model, folder)]


def _keep(dsn: str, rig: str | None, test: str, model: ModalModel) -> dict[str, str]:
    """Store `model` beside `test` in the archive; when and under which digest (JSON-ready)."""
    from .archive.cli import keep_model

    return keep_model(dsn, rig, test, model.npz_bytes(), model.to_dict())
