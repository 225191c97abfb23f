"""flipsweep: unattended current-reversal magnetotransport sweeps.

The functions here are the public API for notebooks and scripts: the same code paths as the
command line, without its printing or exit codes. Errors are raised as acquire.errors
InputError (bad input, nothing sent to an instrument) and RunFailure (a run stopped after
the safe shutdown).

    import acquire
    protocol = acquire.load_protocol("protocols/angle_scan.yaml")
    rig = acquire.load_rig("protocols/rigs/simulated.yaml")
    print(acquire.estimate(protocol, rig).duration_s)
    acquire.run(protocol, rig, "runs/demo", simulate=True, seed=7)
    points = acquire.reduce("runs/demo")        # pandas.DataFrame, as points.csv
    fits = acquire.fit("runs/demo")             # pandas.DataFrame, as fits.csv

Each function imports what it needs when called, so `import acquire` stays cheap.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

from acquire.version import __version__

if TYPE_CHECKING:
    import pandas as pd

    from acquire.inputs.load import LoadedProtocol, LoadedRig
    from acquire.plan.estimate import Estimate

__all__ = ["__version__", "estimate", "fit", "load_protocol", "load_rig", "reduce", "report",
           "resume", "run"]


def load_protocol(path: str | Path) -> LoadedProtocol:
    """Read and validate a protocol file (its `extends` chain merged); InputError if invalid."""
    from acquire.inputs.load import load_protocol as load

    return load(Path(path))


def load_rig(path: str | Path) -> LoadedRig:
    """Read and validate a rig file; InputError if invalid."""
    from acquire.inputs.load import load_rig as load

    return load(Path(path))


def estimate(protocol: LoadedProtocol, rig: LoadedRig | None = None) -> Estimate:
    """Points, readings, duration with its breakdown and the peak current density; checks
    every limit first (InputError naming the loop value that breaks one)."""
    from acquire.inputs.load import check_pair
    from acquire.plan.estimate import estimate as plan

    if rig is not None:
        check_pair(protocol, rig)
    return plan(protocol, rig)


def run(protocol: LoadedProtocol | str | Path, rig: LoadedRig | str | Path, out: str | Path,
        *, simulate: bool = False, seed: int | None = None, realtime: bool = False,
        progress: bool = False) -> int:
    """Run (or with `simulate`, rehearse) a protocol into the new folder `out`; the exit code
    the command line would give (0 done, 130 interrupted); RunFailure if it stopped."""
    from acquire.runtime.session import RunOptions, start_run

    protocol_path = protocol.path if not isinstance(protocol, str | Path) else Path(protocol)
    rig_path = rig.path if not isinstance(rig, str | Path) else Path(rig)
    options = RunOptions(simulate=simulate, seed=seed, realtime=realtime, progress=progress)
    return start_run(protocol_path, rig_path, Path(out), options)


def resume(out: str | Path, *, progress: bool = False) -> int:
    """Continue an interrupted run in its folder."""
    from acquire.runtime.resume import resume_run

    return resume_run(Path(out), progress=progress)


def reduce(run_dir: str | Path) -> pd.DataFrame:
    """Rebuild points.csv from readings.csv and return it."""
    from acquire.store.rereduce import rereduce
    from acquire.store.run_folder import RunFolder

    path, _ = rereduce(Path(run_dir))
    from acquire.modes import mode_named

    record = RunFolder(Path(run_dir)).read_run_json()
    return mode_named(record.mode).tables()[-1].read(path)


def fit(run_dir: str | Path, **options: Any) -> pd.DataFrame:
    """Fit the run's points (options as `flipsweep fit`), write fits.csv and return it."""
    from acquire.analysis import fit_run
    from acquire.analysis.fit_tables import read_fits_table

    return read_fits_table(fit_run(Path(run_dir), **options))


def report(run_dir: str | Path) -> Path:
    """Write the figures and report.html of a run; the page's path."""
    from acquire.analysis import report_run

    return report_run(Path(run_dir))
