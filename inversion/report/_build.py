"""A report of one result file: every figure, summary.md and summary.csv in one folder."""

from __future__ import annotations

from pathlib import Path

from forward import InputError

from ..results._outputs import check_output
from ._data import ReportData, read_report_data
from ._tables import write_summary_csv, write_summary_md

__all__ = ["build_report", "write_report", "report_file_names", "FIGURES", "PROFILE_CHOICES"]

#: the figures of a report, in the order they are drawn
FIGURES = ("spectrum", "profile", "corner", "convergence")

#: how the profile figure shows the species (``profile=`` of :func:`write_report`): "auto"
#: (one panel per species when one is minor, else all on one axis), "overlay", "log" (all on
#: one logarithmic atom-fraction axis), "species" (one panel each)
PROFILE_CHOICES = ("auto", "overlay", "log", "species")


def report_file_names(formats) -> list[str]:
    """Names of the files a report writes into its folder."""
    return [f"{name}.{fmt}" for name in FIGURES for fmt in formats] + ["summary.csv",
                                                                       "summary.md"]


def build_report(result_path, out_dir=None, *, formats=("png", "svg"), log_counts=False,
                 profile="auto", corner=()) -> dict[str, Path]:
    """Make every figure and summary for one result file.

    Parameters
    ----------
    result_path : str or pathlib.Path
        The HDF5 result file.
    out_dir : str or pathlib.Path, optional
        Folder for the outputs (created if needed); default ``<result stem>_report`` beside the
        result file.
    formats : tuple of str, optional
        Image formats for each figure, by file suffix; default PNG and SVG.
    log_counts : bool, optional
        Logarithmic counts axis on the spectrum figure (its zoom panels included).
    profile : str, optional
        One of :data:`PROFILE_CHOICES`: how the profile figure shows the species.
    corner : sequence of str or str, optional
        Groups added to the corner plot's sample quantities: "nuisances", "shares" (or text,
        "nuisances,shares"); default none.

    Returns
    -------
    dict of str to pathlib.Path
        What was written, keyed ``"spectrum.png"``, ``"profile.svg"``, ..., ``"summary.md"``,
        ``"summary.csv"``.  A figure whose data the file lacks is left out (and said so in
        summary.md).

    Raises
    ------
    forward.InputError
        When the result file is missing, corrupt or has no posterior draws, or when an image
        format, a profile choice or a corner group is not one of those allowed.
    """
    return write_report(read_report_data(result_path), out_dir, formats=formats,
                        log_counts=log_counts, profile=profile, corner=corner)


def write_report(data: ReportData, out_dir=None, *, formats=("png", "svg"),
                 force: bool = True, log_counts: bool = False, profile: str = "auto",
                 corner=()) -> dict[str, Path]:
    """Like :func:`build_report`, for a result already read with :func:`read_report_data`.

    With ``force=False`` a report file already in the folder is not replaced
    (:func:`inversion.results._outputs.check_output`; the result file is never written over).
    """
    import matplotlib.pyplot as plt

    from ._chain_figures import corner_groups, plot_convergence, plot_corner
    from ._figures import plot_profile, plot_spectrum

    allowed = {"png", "svg", "pdf"}
    bad = [fmt for fmt in formats if fmt not in allowed]
    if bad or not formats:
        raise InputError(f"image format {bad[0] if bad else '(none)'!r} not supported; "
                         "use png, svg or pdf", where="report: formats")
    if profile not in PROFILE_CHOICES:
        raise InputError(f"unknown profile layout {profile!r}; allowed: "
                         f"{', '.join(PROFILE_CHOICES)}", where="report: profile")
    try:
        corner = corner_groups(corner)
    except ValueError as exc:
        raise InputError(str(exc), where="report: corner") from None
    out = Path(out_dir) if out_dir is not None else \
        data.path.with_name(f"{data.path.stem}_report")
    if not force and out.is_dir():
        for name in report_file_names(formats):
            check_output(out / name, inputs={"result file": data.path}, force=False,
                         kind="report file")
    if out.exists() and not out.is_dir():
        raise InputError("output path is a file; give a folder with -o", where=str(out))
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create the output folder ({exc.strerror}); give a writable "
                         "folder with -o", where=str(out)) from None

    written: dict[str, Path] = {}
    skipped: list[str] = []
    profile_options = {"layout": "overlay", "log_fraction": True} if profile == "log" else \
        {"layout": profile}
    spectra = [("spectrum", data)] if not data.measurements else \
        [(f"spectrum_{name}", part) for name, part in data.measurements.items()]
    makers = tuple(
        (name, plot_spectrum, {"log_counts": bool(log_counts)},
         part.counts is not None and part.predictive is not None, part)
        for name, part in spectra) + (
        ("profile", plot_profile, profile_options,
         bool(data.profile_bands) and data.depth_1e15 is not None, data),
        ("corner", plot_corner, {"include": corner},
         data.samples is not None and data.samples.shape[0] > 1, data),
        ("convergence", plot_convergence, {},
         data.chain is not None and data.chain.shape[0] > 1, data),
    )
    for name, maker, options, available, source in makers:
        if not available:
            skipped.append(name)
            continue
        fig = maker(source, **options)
        try:
            for fmt in formats:
                target = out / f"{name}.{fmt}"
                fig.savefig(target, format=fmt, dpi=150, bbox_inches="tight",
                            facecolor="white")
                written[f"{name}.{fmt}"] = target
        finally:
            plt.close(fig)
    if data.calibration_source and "spectrum" not in skipped:
        data.report_notes.append("energy axis of the spectrum figure: "
                                 + data.calibration_source)
    if data.window is not None and not data.window.all() and "spectrum" not in skipped:
        data.report_notes.append("spectrum residuals are shown only inside the fitted window "
                                 f"({int(data.window.sum())} of {data.window.size} channels)")
    if data.ppc_ranges is not None and len(data.ppc_ranges) and "spectrum" not in skipped:
        data.report_notes.append(
            f"the spectrum figure shades {len(data.ppc_ranges)} channel range(s) where the "
            "residuals run one way (/diagnostics/ppc_ranges)")
    if data.depth_nm is None and "profile" not in skipped:
        data.report_notes.append("the depth profile has no nm axis: the file gives no depth in "
                                 "nm (a layer without a density in the run file)")
    if skipped:
        data.report_notes.append("figures not drawn, as the file lacks their data: "
                                 + ", ".join(skipped))
    written["summary.csv"] = write_summary_csv(data, out / "summary.csv")
    written["summary.md"] = write_summary_md(data, out / "summary.md", written)
    return written
