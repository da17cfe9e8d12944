"""The free-form profile's settings: the ``[fit.nodes]`` keys checked, and their defaults worked
out from the run (depth range, node count from the depth resolution, species, reference).

Defaults (README.md, "Profile model 2: free-form nodes"):

* **range**: with ``layers`` (a mixed model) the depth range those consecutive run-file layers
  occupy; otherwise from the surface to ``depth_1e15`` (default 1.5 x the films above a
  substrate, 1.0 x without one).
* **count**: nodes spaced by half the depth resolution over the range, ``K = ceil(range /
  (R / 2)) + 1`` clamped to 4..40, with ``R`` the mean depth resolution there (detector FWHM
  divided by the largest stopping cross-section factor ``[eps]`` of the run's own sample,
  the quantity ``sondage check`` prints, without straggling): finer nodes than that describe
  what the spectrum cannot see, and the smoothness prior alone decides them.
* **species**: every species of the layers the range touches (a mixed model: its layers and
  the layers just above and below it, whose atoms can diffuse in).
* **reference** (the last species, the log-ratios' denominator): over a substrate whose
  composition the deepest node holds, the substrate's main species; otherwise the species with
  the most atoms over the range in the run file's sample.
"""

from __future__ import annotations

import math

import numpy as np

from forward import InputError

__all__ = ["NODE_KEYS", "node_settings", "depth_resolution", "describe_nodes", "MIN_NODES",
           "MAX_NODES", "AUTO_MAX_NODES"]

NODE_KEYS = {
    "count": "number of nodes, 3 to 60 (default: from the depth resolution)",
    "depth_1e15": "depth of the deepest node (1e15 atoms/cm2, > 0)",
    "layers": "consecutive run-file layers whose depth range the nodes replace (mixed model)",
    "step_sd": "sd of the log-ratio step between neighbouring nodes (> 0)",
    "start_sd": "sd of the first node's log-ratios (> 0)",
    "species": "list of species the nodes describe (at least 2; the last is the reference)",
    "below": "'hold' or 'vacuum'",
}
MIN_NODES, MAX_NODES = 3, 60
#: the automatic count stays within these
AUTO_MIN_NODES, AUTO_MAX_NODES = 4, 40


def depth_resolution(model, slice_fraction: float):
    """Depth resolution (FWHM, 1e15 atoms/cm2) of the run's own sample at each nominal slice.

    The nominal grid's slices each cost the ion ``slice_fraction`` of the detector FWHM in and
    out (:class:`forward.ForwardModel`), so ``width / slice_fraction`` is the detector FWHM
    divided by the largest ``[eps]`` there: the resolution ``sondage check`` prints (without
    straggling).  Slices cut short at a layer boundary are replaced by their layer's widest.

    Returns
    -------
    centres_1e15, resolution_1e15 : ndarray
    """
    edges = np.asarray(model.grid.edges_1e15, dtype=float)
    widths = np.diff(edges)
    layer = getattr(model.grid, "layer", None)
    layer = np.asarray(layer) if layer is not None else \
        np.zeros(widths.size, dtype=int)
    full = widths.copy()
    for k in np.unique(layer):
        on = layer == k
        full[on] = np.maximum(widths[on], np.median(widths[on]))
    return 0.5 * (edges[1:] + edges[:-1]), full / float(slice_fraction)


def _number(value, key, where, *, low=0.0, integer=False):
    ok = isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)
    if ok and integer:
        ok = float(value) == int(value)
    if ok:
        ok = value > low if not integer else value >= low
    if not ok:
        what = "an integer" if integer else "a number"
        raise InputError(f"must be {what} {'>=' if integer else '>'} {low:g}, got {value!r}",
                         where=where(key))
    return int(value) if integer else float(value)


def node_settings(nodes: dict, *, species, layers, where, resolution=None) -> dict:
    """Check ``[fit.nodes]`` and fill in its defaults.

    Parameters
    ----------
    nodes : dict
        The table as written.
    species : tuple of str
        The sample's species columns.
    layers : list of forward.LayerColumns
        The run's layers (surface first) with ``name``, ``composition``, ``substrate`` and
        ``areal_density_1e15``.
    where : callable
        ``where(key) -> "<run file>: fit.<key>"``.
    resolution : (centres_1e15, resolution_1e15), optional
        :func:`depth_resolution` of the run's model; without it the count defaults to 20.

    Returns
    -------
    dict
        ``count``, ``top_1e15``, ``bottom_1e15``, ``depth_1e15`` (= bottom), ``node_depth_1e15``,
        ``total_depth_1e15`` (derived totals count the atoms above it),
        ``step_sd``, ``start_sd``, ``below``, ``columns`` (species, reference last),
        ``layers`` (indices of the replaced layers, empty for the plain model), ``defaults``
        (the names of the keys that took their default), ``resolution_1e15`` (the mean depth
        resolution over the range, NaN when unknown).
    """
    for key in nodes:
        if key not in NODE_KEYS:
            raise InputError(f"unknown key {key!r}; allowed: {', '.join(NODE_KEYS)}",
                             where=where(f"nodes.{key}"))
    defaults = []
    substrate = layers[-1].substrate
    thick = [float(L.areal_density_1e15) for L in layers if not L.substrate]
    tops = np.concatenate([[0.0], np.cumsum(thick)])
    names = [L.name for L in layers]

    region: list[int] = []
    if "layers" in nodes:
        if "depth_1e15" in nodes or "below" in nodes:
            raise InputError("give either layers (nodes inside a layered sample) or "
                             "depth_1e15 / below, not both", where=where("nodes.layers"))
        chosen = nodes["layers"]
        if (not isinstance(chosen, list) or not chosen
                or not all(isinstance(s, str) for s in chosen)):
            raise InputError("must be a non-empty list of layer names, e.g. [\"zone\"]",
                             where=where("nodes.layers"))
        for s in chosen:
            if s not in names:
                raise InputError(f"no layer called {s!r}; layers: {', '.join(names)}",
                                 where=where("nodes.layers"))
        region = sorted(names.index(s) for s in chosen)
        if region != list(range(region[0], region[-1] + 1)) or len(set(chosen)) != len(chosen):
            raise InputError("the layers must be consecutive and distinct, from the surface "
                             "down", where=where("nodes.layers"))
        if any(layers[i].substrate for i in region):
            raise InputError("the substrate cannot be a node layer (it has no depth range); "
                             "name the films whose range the nodes replace",
                             where=where("nodes.layers"))
        top, bottom = float(tops[region[0]]), float(tops[region[-1] + 1])
        below = "layers"
    else:
        depth = nodes.get("depth_1e15")
        if depth is None:
            defaults.append("depth_1e15")
            depth = 1.5 * tops[-1] if substrate else tops[-1]
        depth = _number(depth, "nodes.depth_1e15", where)
        top, bottom = 0.0, depth
        below = nodes.get("below", "hold" if substrate else "vacuum")
        if "below" not in nodes:
            defaults.append("below")
        if below not in ("hold", "vacuum"):
            raise InputError(f"must be 'hold' or 'vacuum', got {below!r}",
                             where=where("nodes.below"))

    # ----- species: those the range touches -----
    def layer_range(i):
        lo = tops[i] if i < tops.size else tops[-1]
        hi = tops[i + 1] if i + 1 < tops.size and not layers[i].substrate else math.inf
        return lo, hi

    if region:
        touched = list(range(max(region[0] - 1, 0), min(region[-1] + 2, len(layers))))
    else:
        touched = [i for i in range(len(layers)) if layer_range(i)[0] < bottom]
    weights = np.zeros(len(species))  # atoms of each species over the range
    for i in touched:
        lo, hi = layer_range(i)
        span = max(min(hi, bottom) - max(lo, top), 0.0)
        weights += span * np.asarray(layers[i].composition, dtype=float)
    present = [c for c in range(len(species)) if any(
        layers[i].composition[c] > 0 for i in touched)]
    if "species" in nodes:
        chosen = nodes["species"]
        if (not isinstance(chosen, list) or len(chosen) < 2
                or any(s not in species for s in chosen) or len(set(chosen)) != len(chosen)):
            raise InputError(f"must list at least two distinct species from {list(species)}, "
                             f"got {chosen!r}", where=where("nodes.species"))
        cols = [species.index(s) for s in chosen]
    else:
        defaults.append("species")
        if len(present) < 2:
            raise InputError("the run's layers over the node range hold one species; list "
                             f"at least two in species (from {list(species)})",
                             where=where("nodes.species"))
        # the reference (last): below a plain range over a substrate, the substrate's main
        # species (the deepest node holds it into the substrate); otherwise the species with
        # the most atoms over the range
        ref = max(present, key=lambda c: (weights[c], -c))
        if not region and below == "hold":
            main = int(np.argmax(layers[-1].composition))
            if main in present:
                ref = main
        cols = [c for c in present if c != ref] + [ref]

    # ----- count -----
    res = math.nan
    if resolution is not None:
        centres, values = (np.asarray(a, dtype=float) for a in resolution)
        inside = (centres >= top) & (centres <= bottom)
        if inside.any():
            res = float(np.mean(values[inside]))
        elif centres.size:
            res = float(values[np.argmin(np.abs(centres - 0.5 * (top + bottom)))])
    if "count" in nodes:
        count = _number(nodes["count"], "nodes.count", where, low=MIN_NODES, integer=True)
        if count > MAX_NODES:
            raise InputError(f"must be at most {MAX_NODES}, got {count}",
                             where=where("nodes.count"))
    else:
        defaults.append("count")
        if math.isfinite(res) and res > 0:
            count = int(math.ceil((bottom - top) / (0.5 * res))) + 1
            count = min(max(count, AUTO_MIN_NODES), AUTO_MAX_NODES)
        else:
            count = 20
    step_sd = _number(nodes.get("step_sd", 0.5), "nodes.step_sd", where)
    start_sd = _number(nodes.get("start_sd", 3.0), "nodes.start_sd", where)
    defaults += [k for k in ("step_sd", "start_sd") if k not in nodes]
    # derived totals count the atoms above this depth: the node range's bottom, or with a
    # mixed model the bottom of the films (the substrate's top), as the layer model does
    total_depth = float(tops[-1]) if region else bottom
    return dict(count=count, top_1e15=top, bottom_1e15=bottom, depth_1e15=bottom,
                total_depth_1e15=total_depth, layer_names=[names[i] for i in region],
                node_depth_1e15=np.linspace(top, bottom, count), step_sd=step_sd,
                start_sd=start_sd, below=below, columns=cols, layers=region,
                defaults=defaults, resolution_1e15=res)


def describe_nodes(nodes: dict, species) -> str:
    """One paragraph saying what the free-form profile is, every default marked (printed by
    ``sondage invert``)."""
    cols = [species[c] for c in nodes["columns"]]
    marks = set(nodes.get("defaults", ()))

    def d(key):
        return " (default)" if key in marks else ""

    top, bottom, count = nodes["top_1e15"], nodes["bottom_1e15"], nodes["count"]
    spacing = (bottom - top) / max(count - 1, 1)
    res = nodes.get("resolution_1e15", math.nan)
    res_text = (f"; depth resolution there {res:.3g}e15 (FWHM), so {res / spacing:.2g} nodes "
                "per resolution" if math.isfinite(res) and res > 0 else "")
    if nodes["below"] == "layers":
        where = f"over layers {nodes.get('layer_names', nodes['layers'])} ({top:g} to " \
                f"{bottom:g}e15 atoms/cm2), the run file's layers above and below"
    else:
        where = (f"from the surface to {bottom:g}e15 atoms/cm2{d('depth_1e15')}, below it "
                 f"{'the deepest node holds' if nodes['below'] == 'hold' else 'vacuum'}"
                 f"{d('below')}")
    return (f"free-form profile: {count} nodes{d('count')} {where}; node spacing "
            f"{spacing:.3g}e15{res_text}; species {', '.join(cols)}{d('species')}, log-ratios "
            f"to {cols[-1]}; first node sd {nodes['start_sd']:g}{d('start_sd')}, step sd "
            f"{nodes['step_sd']:g}{d('step_sd')}")
