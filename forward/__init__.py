"""sondage.forward: the physics of ion backscattering.

This package knows beams, geometry, targets, cross-sections, stopping, energy loss, straggling,
run files, spectrum files and the spectrum model.  It knows nothing about sampling or storage.

Public names are resolved lazily (PEP 562), so ``import forward`` stays cheap and the numba
kernels compile only when a model is first built.
"""

from __future__ import annotations

import importlib

# public name -> private module that defines it
_EXPORTS = {
    # errors and elements
    "InputError": "._errors",
    "InputWarning": "._errors",
    "Element": "._elements",
    "Isotope": "._elements",
    "element": "._elements",
    "isotope": "._elements",
    "ion": "._elements",
    "parse_formula": "._elements",
    # one scattering event
    "kinematic_factor": "._kinematics",
    "max_scattering_angle_deg": "._kinematics",
    "rutherford_cross_section": "._cross_section",
    "screening_factor": "._cross_section",
    "non_rutherford_onset_keV": "._cross_section",
    "check_rutherford_validity": "._cross_section",
    "NonRutherfordWarning": "._cross_section",
    "RatioTable": "._cross_section",
    "load_ratio_table": "._cross_section",
    # stopping
    "stopping": "._stopping",
    "StoppingModel": "._stopping",
    "helium_electronic_stopping": "._stopping",
    "nuclear_stopping": "._stopping",
    "load_stopping_table": "._stopping",
    "StoppingRangeWarning": "._stopping",
    "StoppingTable": "._stopping",
    "check_stopping_range": "._stopping",
    "VALIDATED_MAX_KEV": "._stopping",
    "STOPPING_SLOPE_REFERENCE_KEV": "._stopping",
    "stopping_uncertainty": "._stopping",
    # paths and straggling
    "energy_after_path": "._path",
    "path_to_energy": "._path",
    "stopping_cross_section_factor": "._path",
    "mean_energy_stopping_factor": "._path",
    "Slab": "._path",
    "detected_energy": "._path",
    "bohr_variance": "._straggling",
    "straggling_rate": "._straggling",
    "propagate": "._straggling",
    # inputs
    "Run": "._runfile",
    "load_run": "._runfile",
    "parse_run": "._runfile",
    "Measurement": "._measurements",
    "MeasurementSet": "._measurements",
    "load_measurements": "._measurements",
    "parse_measurements": "._measurements",
    "resolve_spectrum": "._measurements",
    "has_measurements": "._measurements",
    "Spectrum": "._spectrum_io",
    "read_spectrum": "._spectrum_io",
    "NonIntegerCountsWarning": "._spectrum_io",
    "write_spectrum_csv": "._spectrum_io",
    # the spectrum model
    "ForwardModel": "._model",
    "Nuisance": "._model",
    "SliceGrid": "._model",
    "KernelInputs": "._kernel",
    # the sample as columns of the fraction table, species masses
    "SampleColumns": "._columns",
    "LayerColumns": "._columns",
    # the two unit conversions
    "channel_energy_keV": "._conversions",
    "channel_of_energy": "._conversions",
    "atoms_per_cm3": "._conversions",
    "nm_from_1e15": "._conversions",
    "areal_density_from_nm": "._conversions",
    # a run's expected spectrum, and what its set-up implies (sondage simulate, check)
    "simulate": "._simulate",
    "column_name": "._simulate",
    "check_report": "._preflight",
    "find_leading_edge": "._signals",
    "preflight": "._preflight",
    "Preflight": "._preflight",
    "Finding": "._preflight",
    # where each signal lies at the detector; how counts line up with the expected spectrum
    "signal_edges": "._signals",
    "SignalEdge": "._signals",
    "species_edges": "._signals",
    "align_leading_signal": "._signals",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    try:
        module = _EXPORTS[name]
    except KeyError:
        raise AttributeError(f"module 'forward' has no attribute {name!r}") from None
    value = getattr(importlib.import_module(module, __name__), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
