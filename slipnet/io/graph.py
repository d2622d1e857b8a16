"""Saved grain graphs ("slipnet-grain-graph", version 1): a compressed ``.npz`` of plain arrays, no pickle.

Rebuilding grains is the slowest step of a study; a saved graph lets later runs (``slipnet forecast
--graph``, and any command that reuses a cleaned graph) skip it. The file is a zip archive of
``.npy`` arrays read with ``numpy.load(..., allow_pickle=False)``, so opening it can never run
code. Entries:

``graph_meta`` (str, JSON): ``format``, ``version``, ``settings``, ``log``, the table column
names and which optional parts are present; ``map.*``: the map, as the entries of a map bundle
(:mod:`slipnet.io.maps`); ``labels`` (ny, nx) int64; ``mean_quats`` (n, 4); ``kam_deg`` and
``misorientation_to_mean_deg`` (ny, nx) float32; ``subgrain_labels`` (optional);
``polyline_xy`` (k, 2), ``polyline_offsets``, ``polyline_boundaries``: the boundary polylines;
``t.<table>.<column index>``: one array per column of the ``grains``, ``boundaries``,
``triple_junctions`` and (optional) ``subgrain_boundaries`` tables; ``graph_json`` (str): the
networkx graph as node-link JSON (attributes are plain numbers and strings).
"""

from __future__ import annotations

import json
import os
import zipfile
from pathlib import Path

import networkx as nx
import numpy as np
import pandas as pd

from slipnet._files import atomic_path
from slipnet._inputs import check_npz_sizes, checked_input, guarded_reader, loads_json
from slipnet.errors import InputFileError, ParameterError
from slipnet.io._bundle import KEYS as MAP_KEYS
from slipnet.io._bundle import map_arrays, map_from_arrays
from slipnet.io._text import json_default
from slipnet.maps.grain_graph import BoundaryPolylines, GrainGraph

__all__ = ["GRAPH_FORMAT", "GRAPH_VERSION", "read_grain_graph", "write_grain_graph"]

GRAPH_FORMAT = "slipnet-grain-graph"
GRAPH_VERSION = 1
_TABLES = ("grains", "boundaries", "triple_junctions", "subgrain_boundaries")
_ARRAYS = ("labels", "mean_quats", "kam_deg", "misorientation_to_mean_deg", "polyline_xy", "polyline_offsets",
           "polyline_boundaries", "graph_json", "graph_meta")


def _column(values: pd.Series) -> tuple[np.ndarray, str]:
    """A table column as a plain array and the pandas dtype name to restore."""
    kind = values.dtype.kind
    if kind in "biuf":
        return values.to_numpy(), str(values.dtype)
    # strings (object columns of labels such as boundary classes): fixed-width unicode
    return values.astype(str).to_numpy(dtype=str), "str"


def write_grain_graph(gg: GrainGraph, path: str | os.PathLike, *, overwrite: bool = True) -> Path:
    """Save a grain graph in slipnet's own safe format (see the module docstring).

    Parameters
    ----------
    gg
        The grain graph.
    path
        Output file; ``.npz`` is the usual suffix. Written to a temporary name and renamed.
    overwrite
        Replace an existing file.

    Returns
    -------
    Path

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from slipnet.synthetic import make_specimen
    >>> from slipnet.grains import build_grain_graph
    >>> gg = build_grain_graph(make_specimen((30, 40), 2.0, grain_size_um=20.0, seed=1).omap)
    >>> f = write_grain_graph(gg, pathlib.Path(tempfile.mkdtemp()) / "grains.npz")
    >>> read_grain_graph(f).n_grains == gg.n_grains
    True
    """
    if not isinstance(gg, GrainGraph):
        raise ParameterError(f"gg should be a GrainGraph; got {type(gg).__name__}")
    arrays: dict[str, np.ndarray] = {f"map.{k}": v for k, v in map_arrays(gg.omap).items()}
    xy, offsets, chains = gg.boundary_polylines.arrays if isinstance(gg.boundary_polylines, BoundaryPolylines) \
        else _flatten_polylines(gg.boundary_polylines)
    arrays.update({
        "labels": np.ascontiguousarray(gg.labels, dtype=np.int64),
        "mean_quats": np.ascontiguousarray(gg.mean_quats, dtype=np.float64),
        "kam_deg": np.ascontiguousarray(gg.kam_deg),
        "misorientation_to_mean_deg": np.ascontiguousarray(gg.misorientation_to_mean_deg),
        "polyline_xy": np.ascontiguousarray(xy, dtype=np.float64),
        "polyline_offsets": np.ascontiguousarray(offsets, dtype=np.int64),
        "polyline_boundaries": np.ascontiguousarray(chains, dtype=np.int64),
        "graph_json": np.array(json.dumps(nx.node_link_data(gg.graph, edges="edges"), default=json_default)),
    })
    if gg.subgrain_labels is not None:
        arrays["subgrain_labels"] = np.ascontiguousarray(gg.subgrain_labels, dtype=np.int64)
    tables = {}
    for name in _TABLES:
        table = getattr(gg, name)
        if table is None:
            continue
        cols = []
        for i, c in enumerate(table.columns):
            arrays[f"t.{name}.{i}"], dtype = _column(table[c])
            cols.append([str(c), dtype])
        tables[name] = cols
    meta = {"format": GRAPH_FORMAT, "version": GRAPH_VERSION, "settings": gg.settings, "log": list(gg.log),
            "tables": tables, "subgrain_labels": gg.subgrain_labels is not None}
    try:
        arrays["graph_meta"] = np.array(json.dumps(meta, default=json_default))
    except (TypeError, ValueError) as err:
        raise ParameterError(f"the grain graph's settings should hold JSON-compatible values only; {err}") from err
    target = Path(path)
    with atomic_path(target, overwrite=overwrite) as tmp, open(tmp, "wb") as fh:
        np.savez_compressed(fh, **arrays)
    return target


def _flatten_polylines(polylines) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    lines = [[np.asarray(line, float).reshape(-1, 2) for line in polylines[k]] for k in range(len(polylines))]
    counts = np.array([len(ls) for ls in lines], dtype=np.int64)
    flat = [line for ls in lines for line in ls]
    sizes = np.array([len(line) for line in flat], dtype=np.int64)
    xy = np.concatenate(flat) if flat else np.zeros((0, 2))
    return xy, np.concatenate([[0], np.cumsum(sizes)]), np.concatenate([[0], np.cumsum(counts)])


@guarded_reader("saved grain graph", "save the graph again with 'slipnet forecast --save-graph'")
def read_grain_graph(path: str | os.PathLike) -> GrainGraph:
    """Read a grain graph saved by :func:`write_grain_graph`.

    Raises
    ------
    InputFileError
        If the file is missing, damaged, of another format or version, or inconsistent. Files
        holding pickled objects are refused (they could run code).
    """
    p = str(path)
    if not Path(p).exists():
        raise InputFileError("saved grain graph not found; give a file written by 'slipnet forecast --save-graph' "
                             "or slipnet.io.write_grain_graph", path=p)
    checked_input(p, "saved grain graph")
    check_npz_sizes(p, "saved grain graph")
    try:
        with open(p, "rb") as fh, np.load(fh, allow_pickle=False) as npz:
            names = set(npz.files)
            if "graph_meta" not in names:
                raise InputFileError(f"not a slipnet saved grain graph (no 'graph_meta' entry); save graphs with "
                                     f"'slipnet forecast --save-graph' ({GRAPH_FORMAT} files)", path=p)
            meta = loads_json(str(npz["graph_meta"]), "saved graph metadata", path=p)
            if not isinstance(meta, dict):
                raise InputFileError("the saved graph metadata is not a JSON object; save the graph again", path=p)
            if meta.get("format") != GRAPH_FORMAT:
                raise InputFileError(f"format should be {GRAPH_FORMAT!r}; got {meta.get('format')!r}", path=p)
            if meta.get("version") != GRAPH_VERSION:
                raise InputFileError(f"unsupported saved-graph version {meta.get('version')!r}; this slipnet reads "
                                     f"version {GRAPH_VERSION}: save the graph again", path=p)
            need = [*_ARRAYS, *(f"map.{k}" for k in MAP_KEYS)]
            need += [f"t.{t}.{i}" for t, cols in meta["tables"].items() for i in range(len(cols))]
            if meta.get("subgrain_labels"):
                need.append("subgrain_labels")
            missing = [k for k in need if k not in names]
            if missing:
                raise InputFileError(f"the saved graph lacks the entry {missing[0]!r}; save it again", path=p)
            d = {k: npz[k] for k in need}
    except InputFileError:
        raise
    except (zipfile.BadZipFile, OSError, ValueError, EOFError, KeyError, TypeError, AttributeError) as err:
        # a pickled entry raises ValueError under allow_pickle=False: refused, never loaded
        raise InputFileError(f"cannot read the saved grain graph ({type(err).__name__}: {err}); the file is damaged, "
                             "holds pickled objects (refused) or is not a slipnet saved graph", path=p) from err
    try:
        omap = map_from_arrays({k: d[f"map.{k}"] for k in MAP_KEYS}, p)
        tables: dict[str, pd.DataFrame | None] = dict.fromkeys(_TABLES)
        for name, cols in meta["tables"].items():
            data = {}
            for i, (col, dtype) in enumerate(cols):
                v = d[f"t.{name}.{i}"]
                data[col] = v.astype(object) if dtype == "str" else v.astype(dtype)
            tables[name] = pd.DataFrame(data, columns=[c for c, _ in cols])
        graph = nx.node_link_graph(loads_json(str(d["graph_json"]), "saved graph links", path=p), edges="edges")
        gg = GrainGraph(
            omap=omap, labels=d["labels"], graph=graph, grains=tables["grains"], boundaries=tables["boundaries"],
            triple_junctions=tables["triple_junctions"], mean_quats=d["mean_quats"],
            boundary_polylines=BoundaryPolylines(d["polyline_xy"], d["polyline_offsets"], d["polyline_boundaries"]),
            kam_deg=d["kam_deg"], misorientation_to_mean_deg=d["misorientation_to_mean_deg"],
            subgrain_labels=d.get("subgrain_labels"), subgrain_boundaries=tables["subgrain_boundaries"],
            settings=dict(meta.get("settings") or {}), log=tuple(meta.get("log") or ()),
        )
    except InputFileError:
        raise
    except (KeyError, ValueError, TypeError, IndexError, nx.NetworkXError) as err:
        raise InputFileError(f"the saved grain graph is inconsistent: {err}; save it again", path=p) from err
    if gg.labels.shape != omap.shape or gg.mean_quats.shape != (len(gg.grains), 4):
        raise InputFileError(f"the saved grain graph is inconsistent: labels {gg.labels.shape} for a map "
                             f"{omap.shape}, {gg.mean_quats.shape[0]} mean orientations for {len(gg.grains)} grains",
                             path=p)
    return gg
