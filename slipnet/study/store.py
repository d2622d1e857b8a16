"""Save and load the study's intermediates in a safe format: arrays in ``.npz``, the rest in JSON.

An object is taken apart into a JSON tree (numbers, strings, lists, tables of contents) and a
set of plain arrays saved with ``allow_pickle=False``. Only the containers listed in
:data:`STORABLE` are rebuilt, by name, from the fixed table below: nothing read from a file can
name a class or a function to run. Tables (DataFrames) keep their column order, dtypes and index;
floats round-trip bit for bit, so a reused step gives the same numbers as the run that made it.
"""

from __future__ import annotations

import dataclasses
import json
import os
from pathlib import Path

import numpy as np
import pandas as pd

from slipnet._files import atomic_path
from slipnet._inputs import guarded_reader, loads_json
from slipnet.compare.comparison import Comparison
from slipnet.compare.registration import Transform
from slipnet.crystal.slip_systems import SlipSystems
from slipnet.errors import InputFileError, ParameterError
from slipnet.forecast.types import CrackForecast
from slipnet.growth.calibration import CalibrationResult
from slipnet.growth.model import GrowthParameters, GrowthPath, GrowthResult
from slipnet.maps.notch import NotchShape
from slipnet.maps.orientation_map import OrientationMap, Phase
from slipnet.maps.strain import StrainSeries
from slipnet.notch.settings import NotchPlan, PlanSettings
from slipnet.slip.activity import SlipActivity
from slipnet.stress.elastic import StressField

__all__ = ["STORABLE", "STORE_FORMAT", "load_object", "save_object"]

#: Format tag written into every stored tree (bump when the layout changes).
STORE_FORMAT = "slipnet-store-1"

#: The containers the store rebuilds, by class name.
STORABLE: dict[str, type] = {c.__name__: c for c in (
    OrientationMap, Phase, StressField, SlipActivity, SlipSystems, NotchPlan, PlanSettings, NotchShape,
    CrackForecast, GrowthResult, GrowthPath, GrowthParameters, Transform, Comparison, StrainSeries,
    CalibrationResult,
)}


class _Packer:
    def __init__(self) -> None:
        self.arrays: dict[str, np.ndarray] = {}

    def array(self, a: np.ndarray):
        a = np.asarray(a)
        if a.dtype == object:
            return {"objarray": [self.pack(v) for v in a.ravel().tolist()], "shape": list(a.shape)}
        key = f"a{len(self.arrays)}"
        self.arrays[key] = a
        return {"array": key}

    def frame(self, df: pd.DataFrame):
        cols = []
        for name in df.columns:
            s = df[name]
            dtype = str(s.dtype)
            if dtype == "category":
                values = [self.pack(v) for v in s.astype(object)]
                cols.append({"name": self.pack(name), "dtype": dtype, "values": values})
            elif s.dtype == object or dtype.startswith("string"):
                values = [self.pack(v) for v in s.tolist()]
                cols.append({"name": self.pack(name), "dtype": "object", "values": values})
            else:
                cols.append({"name": self.pack(name), "dtype": dtype, "values": self.array(s.to_numpy())})
        index = None if isinstance(df.index, pd.RangeIndex) and df.index.start == 0 and df.index.step == 1 \
            else self.array(df.index.to_numpy())
        return {"frame": cols, "index": index, "rows": len(df)}

    def pack(self, v):
        if v is None or isinstance(v, (bool, str)):
            return v
        if isinstance(v, (int, float)):
            return v
        if isinstance(v, np.generic):
            return {"scalar": v.item(), "dtype": str(v.dtype)}
        if isinstance(v, np.ndarray):
            return self.array(v)
        if isinstance(v, pd.DataFrame):
            return self.frame(v)
        if isinstance(v, os.PathLike):
            return os.fspath(v)
        if isinstance(v, tuple):
            return {"tuple": [self.pack(x) for x in v]}
        if isinstance(v, list):
            return {"list": [self.pack(x) for x in v]}
        if isinstance(v, dict):
            return {"dict": [[self.pack(k), self.pack(x)] for k, x in v.items()]}
        if isinstance(v, (set, frozenset)):
            return {"list": [self.pack(x) for x in sorted(v)]}
        if dataclasses.is_dataclass(v) and type(v).__name__ in STORABLE and STORABLE[type(v).__name__] is type(v):
            return {"object": type(v).__name__,
                    "fields": {f.name: self.pack(getattr(v, f.name)) for f in dataclasses.fields(v)}}
        raise ParameterError(f"the study store cannot save a {type(v).__name__}; it saves "
                             f"{', '.join(sorted(STORABLE))}, tables, arrays and plain values")


def _unpack(node, arrays, path: str):
    if node is None or isinstance(node, (bool, str, int, float)):
        return node
    if not isinstance(node, dict) or len(node) == 0:
        raise InputFileError(f"damaged store entry ({node!r}); delete the file and run again", path=path)
    if "array" in node:
        return arrays[node["array"]]
    if "objarray" in node:
        out = np.empty(len(node["objarray"]), dtype=object)
        out[:] = [_unpack(x, arrays, path) for x in node["objarray"]]
        return out.reshape(node["shape"])
    if "scalar" in node:
        return np.dtype(node["dtype"]).type(node["scalar"])
    if "frame" in node:
        data = {}
        for col in node["frame"]:
            name = _unpack(col["name"], arrays, path)
            if col["dtype"] in ("object", "category"):
                vals = pd.Series([_unpack(x, arrays, path) for x in col["values"]], dtype=object)
                data[name] = vals.astype("category") if col["dtype"] == "category" else vals
            else:
                data[name] = pd.Series(_unpack(col["values"], arrays, path), dtype=col["dtype"])
        df = pd.DataFrame(data) if data else pd.DataFrame(index=range(node["rows"]))
        if node["index"] is not None:
            df.index = _unpack(node["index"], arrays, path)
        return df
    if "tuple" in node:
        return tuple(_unpack(x, arrays, path) for x in node["tuple"])
    if "list" in node:
        return [_unpack(x, arrays, path) for x in node["list"]]
    if "dict" in node:
        return {_key(_unpack(k, arrays, path)): _unpack(x, arrays, path) for k, x in node["dict"]}
    if "object" in node:
        cls = STORABLE.get(node["object"])
        if cls is None:
            raise InputFileError(f"the store names an unknown container {node['object']!r}; delete the file and "
                                 "run again", path=path)
        obj = object.__new__(cls)
        for name, value in node["fields"].items():
            object.__setattr__(obj, name, _unpack(value, arrays, path))
        return obj
    raise InputFileError(f"damaged store entry (keys {sorted(node)}); delete the file and run again", path=path)


def _key(k):
    return tuple(k) if isinstance(k, list) else k


def save_object(obj, path: str | os.PathLike) -> Path:
    """Save ``obj`` (a container of :data:`STORABLE`, a table, or plain values) as ``path`` (``.npz``).

    The arrays and the JSON tree go into one ``.npz`` file, written to a temporary name and renamed.

    Examples
    --------
    >>> import tempfile, pandas as pd
    >>> p = save_object({"t": pd.DataFrame({"x_um": [1.5, 2.0]})}, tempfile.mkdtemp() + "/x.npz")
    >>> load_object(p)["t"]["x_um"].tolist()
    [1.5, 2.0]
    """
    packer = _Packer()
    tree = packer.pack(obj)
    text = json.dumps({"format": STORE_FORMAT, "tree": tree})
    path = Path(path)
    with atomic_path(path) as tmp, open(tmp, "wb") as fh:
        np.savez(fh, __tree__=np.array(text), **packer.arrays)
    return path


@guarded_reader("stored study step", "delete it and run again")
def load_object(path: str | os.PathLike):
    """Load what :func:`save_object` saved.

    Raises
    ------
    InputFileError
        A missing or damaged file, or one of another format.
    """
    p = str(path)
    try:
        with np.load(p, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files}
    except (OSError, ValueError, EOFError) as err:
        raise InputFileError(f"cannot read the stored step ({err}); delete it and run again", path=p) from err
    try:
        doc = loads_json(str(arrays.pop("__tree__")), "stored step tree", path=p)
    except (KeyError, ValueError) as err:
        raise InputFileError("not a slipnet study store (no tree); delete it and run again", path=p) from err
    if doc.get("format") != STORE_FORMAT:
        raise InputFileError(f"store format {doc.get('format')!r}, expected {STORE_FORMAT!r}; delete it and run "
                             "again", path=p)
    return _unpack(doc["tree"], arrays, p)
