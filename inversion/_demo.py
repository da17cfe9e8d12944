"""The bundled invented demo, end to end: check the run file and spectrum, invert, report."""

from __future__ import annotations

import time
from pathlib import Path

from forward import InputError

__all__ = ["run_demo", "demo_folder", "DEMO_MAX_STEPS"]

#: Step cap of the demo's chain.  With the straggling correction free (16 parameters) the demo
#: posterior's longest autocorrelation time is about 70-80 steps, so the 50-tau rule asks for
#: about 4000 steps; the chain stops as soon as it is converged, and the cap leaves room for
#: an autocorrelation time that grows as the chain does (benchmarks/RESULTS.md).
DEMO_MAX_STEPS = 8000


def demo_folder() -> Path:
    """Where the demo's inputs are: the source tree's data/demo, or the copy inside a wheel."""
    here = Path(__file__).resolve().parent  # the inversion package
    for candidate in (here / "_data" / "demo", here.parent / "data" / "demo"):
        if (candidate / "run.toml").exists():
            return candidate
    raise InputError("the bundled demo files are missing (looked for data/demo/run.toml beside "
                     "the package); reinstall sondage from its source tree")


def run_demo(output="demo-output", *, max_steps: int = DEMO_MAX_STEPS, seed: int = 0,
             workers=None, quiet: bool = False) -> dict:
    """Run the bundled invented demo end to end: check, invert, report; print where
    everything went.

    Parameters
    ----------
    output : path
        The demo's own folder (an earlier demo result in it is replaced).
    max_steps, seed : int
        Chain length and seed of the inversion.
    workers : int, optional
        Processes evaluating the model (default as for ``sondage invert``).
    quiet : bool
        Print nothing.

    Returns
    -------
    dict
        Name -> path of the report's files.
    """
    import forward

    from ._api import invert
    from .report._build import write_report
    from .report._data import read_report_data
    from .report._tables import format_summary_text, interval_table
    from .sample._workers import DEFAULT_WORKERS

    quiet = bool(quiet)
    say = (lambda *a, **k: None) if quiet else print
    if max_steps < 1:
        raise InputError(f"--max-steps {max_steps}: must be a whole number >= 1")
    folder = demo_folder()
    out = Path(output)
    if out.exists() and not out.is_dir():
        raise InputError(f"{out} exists and is not a folder; give -o a folder for the demo")
    out.mkdir(parents=True, exist_ok=True)
    run_file, spectrum = folder / "run.toml", folder / "spectrum.csv"
    result_file, report_dir = out / "demo-result.h5", out / "report"
    t0 = time.perf_counter()

    say("== 1/3  checking the run file and the spectrum (INVENTED demo data) ==")
    say(forward.check_report(forward.load_run(run_file), forward.read_spectrum(spectrum)))

    say("== 2/3  inverting the spectrum ==")
    workers = workers if workers is not None else DEFAULT_WORKERS
    result = invert(run_file, spectrum, result_file, seed=seed, max_steps=max_steps,
                    force=True, workers=workers, progress=not quiet,
                    command=f"sondage demo -o {out} --max-steps {max_steps}")
    say(interval_table(result))

    say("== 3/3  writing the report ==")
    data = read_report_data(result_file)
    written = write_report(data, report_dir)
    say(format_summary_text(data, compact=True))

    say("")
    say(f"demo finished in {time.perf_counter() - t0:.0f} s")
    say(f"  run file      {run_file}")
    say(f"  spectrum      {spectrum}   (simulated, INVENTED)")
    say(f"  true values   {folder / 'TRUTH.md'}")
    say(f"  result file   {result_file}")
    say(f"  report        {report_dir}/")
    for name in sorted({Path(p).name for p in written.values()}):
        say(f"                  {name}")
    return written

