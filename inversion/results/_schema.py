"""The layouts of the result file and the series file: every dataset name, in one place.

The README's "Result file (HDF5)" and "The series result file" sections are the public contract;
this module is its one copy in the code.  Writers build their trees with these names and the
units and descriptions below; readers look them up here.  A new dataset is one entry in
:data:`DATASETS` (its path, unit and description) and one line in the writer that fills it;
the reader picks it up without a change, since it reads whole groups.

Summaries use one vocabulary everywhere in the code, :data:`STATS`: ``median``, ``mean``,
``sd``, ``low68``, ``high68``, ``low95``, ``high95`` (the result file's own names).  Two
outputs spell them differently, and the mapping lives here only: the series file
(:data:`SERIES_STAT_NAMES`, ``lo68``...) and summary.csv (:data:`CSV_STAT_COLUMNS`,
``lower_68``...).
"""

from __future__ import annotations

__all__ = ["FORMAT_VERSION", "QUANTILES", "STATS", "INTERVAL_NOTE", "MCMC", "FINAL_GROUPS",
           "INPUT_RUN", "INPUT_SPECTRUM", "INPUT_MEASURED", "INPUT_PRIORS", "START",
           "SAMPLES", "LOG_POSTERIOR", "POSTERIOR_PRIORS", "SUMMARY", "DERIVED", "PROFILE",
           "SPECTRUM", "DIAGNOSTICS", "MEASUREMENTS", "INPUT_MEASUREMENTS",
           "INPUT_MEASUREMENT_CHANNELS", "DATASETS", "attrs_of", "SERIES_KIND",
           "SERIES_STAT_NAMES", "series_name", "CSV_STAT_COLUMNS", "SERIES_MEMBERS_TABLE",
           "SERIES_MEMBERS_LINKS", "SERIES_MEMBERS_SUMMARY", "SERIES_DIFFUSION",
           "SERIES_ARRHENIUS", "SERIES_COMPARISON", "SERIES_COMPARISON_STATS"]

#: written as the root attribute ``format_version`` of both kinds of file; a file without it
#: is version 1 (same layout, written before the attribute existed).  Version 3: the profile
#: bands lie on a shared depth grid of points (``/profile/depth``), no longer on slice centres;
#: ``/diagnostics`` gains the predictive check, R-hat and the start searches.  Version 4: a
#: joint run of several spectra keeps one group per spectrum under ``/measurements`` (and
#: their names and channel counts under ``/input``); single runs are laid out as in version 3.
FORMAT_VERSION = 4

#: quantiles (fractions) of every band and predictive spectrum: 2.5, 16, 50, 84, 97.5 %
QUANTILES = (0.025, 0.16, 0.5, 0.84, 0.975)

#: the one summary vocabulary: central intervals low68/high68 = 16/84 %, low95/high95 = 2.5/97.5 %
STATS = ("median", "mean", "sd", "low68", "high68", "low95", "high95")
INTERVAL_NOTE = "central: low68/high68 = 16/84 %, low95/high95 = 2.5/97.5 % quantiles"

# ----- the result file -----
MCMC = "mcmc"                        # emcee's backend layout plus the resume slots
INPUT_RUN = "input/run"
INPUT_SPECTRUM = "input/spectrum"
INPUT_MEASURED = "input/measured"
INPUT_PRIORS = "input/priors"
START = "start"                      # attributes only: theta, names, log_posterior, method
SAMPLES = "posterior/samples"
LOG_POSTERIOR = "posterior/log_posterior"
POSTERIOR_PRIORS = "posterior/priors"
SUMMARY = "posterior/summary"
DERIVED = "derived"
PROFILE = "profile"
SPECTRUM = "spectrum"
DIAGNOSTICS = "diagnostics"
#: joint runs: one group per spectrum, ``measurements/<name>/``, holding the datasets of
#: ``/spectrum`` and the spectrum's own predictive check
MEASUREMENTS = "measurements"
INPUT_MEASUREMENTS = "input/measurements"
INPUT_MEASUREMENT_CHANNELS = "input/measurement_channels"
#: groups written at the end of a run, staged and swapped into place together
FINAL_GROUPS = ("posterior", DERIVED, PROFILE, SPECTRUM, DIAGNOSTICS, MEASUREMENTS)

#: dataset -> (unit, description) for the attributes the writer puts beside the data;
#: ``{species}`` and ``{name}`` stand for one dataset per species or derived quantity
DATASETS = {
    INPUT_RUN: (None, None),
    INPUT_SPECTRUM: ("counts", "measured counts per channel, channel 0 first"),
    INPUT_MEASURED: (None, None),
    INPUT_PRIORS: (None, None),
    SAMPLES: (None, "posterior draws after burn-in (discard) and thinning, walkers flattened"),
    LOG_POSTERIOR: ("natural log", None),
    POSTERIOR_PRIORS: (None, None),
    "derived/{name}": (None, None),           # unit and note given per quantity
    "profile/depth": ("1e15 atoms/cm2", "points of the shared depth grid of the bands"),
    "profile/depth_nm": ("nm", "the same points, converted with the run file's layer "
                               "densities"),
    "profile/node_depth": ("1e15 atoms/cm2", "depths of the free-form profile's nodes"),
    "profile/{species}": ("atom fraction", None),
    "profile/{species}_map": ("atom fraction", "highest-posterior draw"),
    "spectrum/channel": (None, None),
    "spectrum/counts": ("counts", None),
    "spectrum/window": (None, "channels in the likelihood"),
    "spectrum/energy_keV": ("keV", "channel energies at the highest-posterior draw's "
                                   "calibration"),
    "spectrum/predictive": ("counts", "posterior predictive, Poisson noise included"),
    "spectrum/model_median": ("counts", None),
    "spectrum/species/{species}": ("counts", "median model, this species"),
    INPUT_MEASUREMENTS: (None, "joint runs: the measurements' names, in the order their "
                               "spectra are joined in input/spectrum"),
    INPUT_MEASUREMENT_CHANNELS: (None, "joint runs: channels of each measurement's spectrum "
                                       "in input/spectrum"),
    "measurements/{name}/ppc_deviance": (None, "this spectrum's Poisson deviance per "
                                               "posterior draw: observed, replicated"),
    "measurements/{name}/ppc_blocks": (None, "this spectrum's window blocks: first channel, "
                                             "last channel, standardised residual sum z"),
    "measurements/{name}/ppc_ranges": (None, "this spectrum's channel ranges where the "
                                             "residuals run systematically: first, last, "
                                             "sign"),
    "diagnostics/autocorr_time": ("steps", None),
    "diagnostics/acceptance": (None, "acceptance fraction per walker"),
    "diagnostics/ess": (None, "effective sample size: steps x walkers / tau"),
    "diagnostics/rhat": (None, "rank-normalised split R-hat per parameter, every walker a "
                               "chain (Vehtari et al. 2021); converged needs <= 1.01"),
    "diagnostics/starts": (None, "independent start searches, one row each: log-posterior, "
                                 "then the parameters"),
    "diagnostics/ppc_deviance": (None, "Poisson deviance per posterior draw: observed, "
                                       "replicated (Gelman, Meng & Stern 1996)"),
    "diagnostics/ppc_blocks": (None, "window blocks of about one FWHM: first channel, last "
                                     "channel, standardised residual sum z"),
    "diagnostics/ppc_ranges": (None, "channel ranges where the residuals run systematically: "
                                     "first, last, sign (+1: data above the model)"),
}


def attrs_of(key: str, **extra) -> dict:
    """The attributes a dataset of :data:`DATASETS` is written with, plus ``extra``."""
    unit, description = DATASETS[key]
    out = {}
    if unit is not None:
        out["unit"] = unit
    if description is not None:
        out["description"] = description
    out.update(extra)
    return out


# ----- the series file -----
SERIES_KIND = "series"               # the root attribute ``kind``
SERIES_MEMBERS_TABLE = "members/table"
SERIES_MEMBERS_LINKS = "members/links"
SERIES_MEMBERS_SUMMARY = "members/summary"
SERIES_DIFFUSION = "diffusion"
SERIES_ARRHENIUS = "arrhenius"
SERIES_COMPARISON = "comparison"
#: statistics stored per comparison row, in the code's vocabulary
SERIES_COMPARISON_STATS = ("median", "low95", "high95")

#: the series file's documented spelling of the summary statistics
SERIES_STAT_NAMES = {"median": "median", "mean": "mean", "sd": "sd", "low68": "lo68",
                     "high68": "hi68", "low95": "lo95", "high95": "hi95"}

#: summary.csv's column of each statistic
CSV_STAT_COLUMNS = {"median": "median", "mean": "mean", "sd": "sd", "low68": "lower_68",
                    "high68": "upper_68", "low95": "lower_95", "high95": "upper_95"}


def series_name(stat: str) -> str:
    """The series file's name of a statistic of :data:`STATS` (``low68`` -> ``lo68``)."""
    return SERIES_STAT_NAMES[stat]
