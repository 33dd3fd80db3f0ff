"""A data-only file format: saved results and stored work units that cannot run code when read.

A pickle runs whatever its bytes ask for when it is loaded, so a result file or
a run store received from someone else could do anything on opening.  This
module is the one codec selectkit uses instead.  A *data file* (or a stored
unit's bytes) is::

    MAGIC                         b"selectkit-data\\n" (15 bytes)
    length                        8 bytes, little-endian unsigned: size of the JSON document
    JSON document (UTF-8)         {"format": ..., "version": ..., "arrays": m, "value": ...}
    m arrays                      each in numpy's ``.npy`` layout, written and read with
                                  ``allow_pickle=False`` (numeric, boolean, text or date dtypes only)

``value`` is the encoded value: JSON numbers, strings, booleans, null and lists
stand for themselves; everything else is a JSON object with a ``"$"`` tag —
``tuple``, ``dict`` (a list of key/value pairs, so keys keep their type),
``float`` (NaN and infinities), ``array`` / ``scalar`` (an index into the
arrays), ``objects`` (an array of plain values), ``frame`` / ``series`` /
``index`` / ``categorical`` (pandas values column by column) and ``record``
(an instance of one of the few selectkit value classes named in
:func:`_record_types`, rebuilt field by field without calling any of its code).
Decoding refuses any tag, record type or dtype not on these lists, so reading a
file only ever builds plain data.
"""

from __future__ import annotations

import dataclasses
import io
import json
import math
import struct
from types import MappingProxyType

import numpy as np
import pandas as pd

__all__ = ["MAGIC", "RefusedData", "dumps", "loads", "looks_like_pickle"]

MAGIC = b"selectkit-data\n"
_LENGTH = struct.Struct("<Q")
#: dtype kinds an array may have: booleans, integers, floats, complex, text, dates and durations.
_ARRAY_KINDS = frozenset("biufcUSMm")


class RefusedData(ValueError):
    """Bytes that are not a data file of the expected kind; ``reason`` says why in a few words."""

    def __init__(self, reason: str):
        super().__init__(reason)
        self.reason = reason


def looks_like_pickle(blob: bytes) -> bool:
    """Whether ``blob`` starts like a pickle (protocol 2 or later), to word the refusal."""
    return len(blob) >= 2 and blob[0] == 0x80 and 2 <= blob[1] <= 5


# --------------------------------------------------------------------------- the record types
def _record_types() -> dict:
    """The selectkit value classes a data file may hold, by name.

    Imported when first needed (this bottom-level module imports no stage at
    load time).  Only these are ever rebuilt; a name not here is refused.
    """
    from . import _budget, candidates, data, inference, moments, parts, rank
    from .api import MethodRun, SearchSetup
    from .searches import _found, crossval, exhaustive, screen, stepwise

    classes = [
        _found.Found, candidates.Term, candidates.Refusal, candidates.ResponseTransform, candidates.CandidateSet,
        data.Note, data.IntakeReport, data.Dataset, moments.Moments, rank.ModelFit, rank.Shortlist,
        rank.Stability, crossval.FoldScheme, crossval.Fold, crossval.CrossvalOptions, crossval.NestedResult,
        exhaustive.ExhaustiveOptions, stepwise.StepwiseOptions, screen.ScreenOptions, screen.ScreenResult,
        _budget.Deadline, MethodRun, SearchSetup, inference.SplitInference, parts.PartsInfo,
    ]
    return {cls.__name__: cls for cls in classes}


def _check_record(cls, fields: dict) -> None:
    """Checks of a rebuilt record whose fields are used to find code (never trust them from a file)."""
    if cls.__name__ == "MethodRun":
        from .searches._adapters import MODULES

        if fields.get("module_name") not in set(MODULES.values()):
            raise RefusedData(f"a search names the module {fields.get('module_name')!r}, which is not one of "
                              f"selectkit's searches")


# --------------------------------------------------------------------------- encoding
class _Encoder:
    def __init__(self):
        self.arrays: list[np.ndarray] = []
        self.types = None

    def array(self, values: np.ndarray) -> dict:
        values = np.asarray(values)
        if values.dtype.kind == "O":
            return {"$": "objects", "shape": list(values.shape),
                    "items": [self.value(v) for v in values.reshape(-1).tolist()]}
        if values.dtype.kind not in _ARRAY_KINDS:
            raise TypeError(f"an array of dtype {values.dtype} cannot be saved in a selectkit data file")
        self.arrays.append(np.ascontiguousarray(values))
        return {"$": "array", "i": len(self.arrays) - 1}

    def value(self, value):
        if value is None or isinstance(value, (bool, str)):
            return value
        if isinstance(value, int) and not isinstance(value, np.integer):
            return int(value)
        if isinstance(value, float) and not isinstance(value, np.floating):
            return value if math.isfinite(value) else {"$": "float", "v": repr(float(value))}
        if isinstance(value, np.generic):
            if value.dtype.kind not in _ARRAY_KINDS:
                raise TypeError(f"a numpy value of dtype {value.dtype} cannot be saved in a selectkit data file")
            self.arrays.append(np.asarray(value))
            return {"$": "scalar", "i": len(self.arrays) - 1}
        if isinstance(value, list):
            return [self.value(v) for v in value]
        if isinstance(value, tuple):
            return {"$": "tuple", "items": [self.value(v) for v in value]}
        if isinstance(value, (set, frozenset)):
            return {"$": "frozenset" if isinstance(value, frozenset) else "set",
                    "items": [self.value(v) for v in value]}
        if isinstance(value, MappingProxyType):
            return {"$": "readonly", "items": [[self.value(k), self.value(v)] for k, v in value.items()]}
        if isinstance(value, dict):
            return {"$": "dict", "items": [[self.value(k), self.value(v)] for k, v in value.items()]}
        if isinstance(value, np.ndarray):
            return self.array(value)
        if value is pd.NA:
            return {"$": "missing"}
        if isinstance(value, pd.DataFrame):
            return self.frame(value)
        if isinstance(value, pd.Series):
            return {"$": "series", "name": self.value(value.name), "index": self.index(value.index),
                    "values": self.column(value)}
        if isinstance(value, pd.Index):
            return self.index(value)
        if dataclasses.is_dataclass(value) and not isinstance(value, type):
            return self.record(value)
        raise TypeError(f"a value of type {type(value).__name__} cannot be saved in a selectkit data file")

    def record(self, value) -> dict:
        if self.types is None:
            self.types = _record_types()
        name = type(value).__name__
        if self.types.get(name) is not type(value):
            raise TypeError(f"a {type(value).__module__}.{name} cannot be saved in a selectkit data file")
        fields = {}
        for f in dataclasses.fields(value):
            item = getattr(value, f.name)
            if name == "SearchSetup" and f.name == "deadline":
                item = None  # a run's clock means nothing once it is saved
            if name == "PartsInfo" and f.name == "table":
                item = None  # how to reread the parts is this run's, not the file's
            fields[f.name] = self.value(item)
        return {"$": "record", "type": name, "fields": fields}

    def column(self, series: pd.Series) -> dict:
        dtype = series.dtype
        if isinstance(dtype, pd.CategoricalDtype):
            return {"$": "categorical", "categories": self.index(dtype.categories), "ordered": bool(dtype.ordered),
                    "codes": self.array(np.asarray(series.cat.codes))}
        if isinstance(dtype, np.dtype):
            return self.array(series.to_numpy())
        return {"$": "extension", "dtype": str(dtype),
                "items": [self.value(None if v is pd.NA else v) for v in series.tolist()]}

    def index(self, index: pd.Index) -> dict:
        if isinstance(index, pd.MultiIndex):
            raise TypeError("a table with a multi-level index cannot be saved in a selectkit data file")
        if isinstance(index, pd.RangeIndex):
            return {"$": "range", "start": index.start, "stop": index.stop, "step": index.step,
                    "name": self.value(index.name)}
        return {"$": "index", "name": self.value(index.name), "values": self.column(pd.Series(index, copy=False))}

    def frame(self, frame: pd.DataFrame) -> dict:
        return {"$": "frame", "columns": self.index(frame.columns), "index": self.index(frame.index),
                "data": [self.column(frame.iloc[:, j]) for j in range(frame.shape[1])]}


def dumps(value, *, kind: str, version: int) -> bytes:
    """Encode ``value`` as the bytes of a data file of ``kind`` (e.g. ``"selectkit-result"``) and ``version``.

    Raises
    ------
    TypeError
        When ``value`` holds something the format has no place for (a function, an unknown class).
    """
    encoder = _Encoder()
    encoded = encoder.value(value)
    document = json.dumps({"format": kind, "version": int(version), "arrays": len(encoder.arrays),
                           "value": encoded}, ensure_ascii=True, allow_nan=False, separators=(",", ":"))
    text = document.encode("utf-8")
    out = io.BytesIO()
    out.write(MAGIC)
    out.write(_LENGTH.pack(len(text)))
    out.write(text)
    for array in encoder.arrays:
        np.lib.format.write_array(out, array, allow_pickle=False)
    return out.getvalue()


# --------------------------------------------------------------------------- decoding
class _Decoder:
    def __init__(self, arrays: list):
        self.arrays = arrays
        self.types = None

    def _array(self, spec) -> np.ndarray:
        i = spec.get("i")
        if not isinstance(i, int) or isinstance(i, bool) or not 0 <= i < len(self.arrays):
            raise RefusedData("an array reference points nowhere")
        return self.arrays[i]

    def value(self, node):
        if node is None or isinstance(node, (bool, str, int, float)):
            return node
        if isinstance(node, list):
            return [self.value(v) for v in node]
        if not isinstance(node, dict):  # pragma: no cover - JSON has no other kind
            raise RefusedData("an unknown kind of value")
        tag = node.get("$")
        if tag == "tuple":
            return tuple(self.value(v) for v in self._items(node))
        if tag == "dict":
            return {self.value(k): self.value(v) for k, v in self._pairs(node)}
        if tag == "readonly":
            return MappingProxyType({self.value(k): self.value(v) for k, v in self._pairs(node)})
        if tag == "set":
            return {self.value(v) for v in self._items(node)}
        if tag == "frozenset":
            return frozenset(self.value(v) for v in self._items(node))
        if tag == "float":
            if node.get("v") not in ("nan", "inf", "-inf"):
                raise RefusedData("a number that is not one")
            return float(node["v"])
        if tag == "scalar":
            array = self._array(node)
            if array.ndim != 0:
                raise RefusedData("a single number stored as an array")
            return array[()]
        if tag in ("array", "objects", "categorical", "extension"):
            return self.column(node)
        if tag == "missing":
            return pd.NA
        if tag == "frame":
            return self.frame(node)
        if tag == "series":
            index = self.index(node.get("index"))
            return pd.Series(self.column(node.get("values")), index=index, name=self.value(node.get("name")),
                             copy=False)
        if tag in ("index", "range"):
            return self.index(node)
        if tag == "record":
            return self.record(node)
        raise RefusedData(f"an unknown kind of value {str(tag)[:40]!r}")

    @staticmethod
    def _items(node) -> list:
        items = node.get("items")
        if not isinstance(items, list):
            raise RefusedData("a list without items")
        return items

    def _pairs(self, node) -> list:
        pairs = self._items(node)
        if not all(isinstance(p, list) and len(p) == 2 for p in pairs):
            raise RefusedData("a mapping whose items are not pairs")
        return pairs

    def column(self, node):
        if not isinstance(node, dict):
            raise RefusedData("a column that is not one")
        tag = node.get("$")
        if tag == "array":
            return self._array(node)
        if tag == "objects":
            shape = node.get("shape")
            items = [self.value(v) for v in self._items(node)]
            if not isinstance(shape, list) or not all(isinstance(s, int) and s >= 0 for s in shape) \
                    or int(np.prod(shape, dtype=np.int64)) != len(items):
                raise RefusedData("a table of values whose shape does not match its items")
            out = np.empty(len(items), dtype=object)
            out[:] = items if items else []
            return out.reshape(shape)
        if tag == "categorical":
            categories = self.index(node.get("categories"))
            codes = self.column(node.get("codes"))
            if codes.dtype.kind not in "iu" or codes.ndim != 1 or (codes.size and (
                    codes.min() < -1 or codes.max() >= len(categories))):
                raise RefusedData("a categorical column whose codes do not fit its categories")
            return pd.Categorical.from_codes(codes, categories=categories, ordered=bool(node.get("ordered")))
        if tag == "extension":
            dtype = node.get("dtype")
            if not isinstance(dtype, str):
                raise RefusedData("a column of unknown type")
            items = [pd.NA if v is None else v for v in (self.value(v) for v in self._items(node))]
            try:
                return pd.array(items, dtype=pd.api.types.pandas_dtype(dtype))
            except (TypeError, ValueError) as err:
                raise RefusedData(f"a column of type {dtype[:40]!r} this pandas cannot build") from err
        raise RefusedData("a column that is not one")

    def index(self, node) -> pd.Index:
        if not isinstance(node, dict):
            raise RefusedData("an index that is not one")
        if node.get("$") == "range":
            bounds = [node.get(n) for n in ("start", "stop", "step")]
            if not all(isinstance(b, int) and not isinstance(b, bool) for b in bounds) or bounds[2] == 0:
                raise RefusedData("a row range that is not one")
            return pd.RangeIndex(*bounds, name=self.value(node.get("name")))
        if node.get("$") != "index":
            raise RefusedData("an index that is not one")
        values = self.column(node.get("values"))
        return pd.Index(values, name=self.value(node.get("name")), copy=False,
                        dtype=object if isinstance(values, np.ndarray) and values.dtype.kind == "O" else None)

    def frame(self, node) -> pd.DataFrame:
        columns = self.index(node.get("columns"))
        index = self.index(node.get("index"))
        data = node.get("data")
        if not isinstance(data, list) or len(data) != len(columns):
            raise RefusedData("a table whose columns do not match their names")
        parts = {}
        for j, column in enumerate(data):
            values = self.column(column)
            if len(values) != len(index):
                raise RefusedData("a table whose columns differ in length")
            parts[j] = pd.Series(values, index=index, copy=False)
        frame = pd.DataFrame(parts, index=index) if parts else pd.DataFrame(index=index)
        frame.columns = columns
        return frame

    def record(self, node):
        if self.types is None:
            self.types = _record_types()
        name, fields = node.get("type"), node.get("fields")
        cls = self.types.get(name) if isinstance(name, str) else None
        if cls is None:
            raise RefusedData(f"a value of type {str(name)[:40]!r}, which a selectkit data file may not hold")
        if not isinstance(fields, dict):
            raise RefusedData(f"a {name} without fields")
        declared = {f.name: f for f in dataclasses.fields(cls)}
        unknown = set(fields) - set(declared)
        if unknown:
            raise RefusedData(f"a {name} with unknown fields {sorted(unknown)[:3]}")
        values = {key: self.value(item) for key, item in fields.items()}
        for key, f in declared.items():
            if key in values:
                continue
            if f.default is not dataclasses.MISSING:
                values[key] = f.default
            elif f.default_factory is not dataclasses.MISSING:
                values[key] = f.default_factory()
            else:
                raise RefusedData(f"a {name} without its field {key!r}")
        _check_record(cls, values)
        # Rebuilt field by field, then checked by the class's own validation (its __post_init__, which only
        # checks and normalises fields): what runs is selectkit's code, on plain values.
        instance = object.__new__(cls)
        for key, item in values.items():
            object.__setattr__(instance, key, item)
        post_init = getattr(cls, "__post_init__", None)
        if post_init is not None:
            try:
                post_init(instance)
            except Exception as err:  # any refusal of the class is a refusal of the file
                raise RefusedData(f"a {name} whose fields the class refuses ({type(err).__name__}: "
                                  f"{str(err)[:120]})") from err
        return instance


def loads(blob: bytes, *, kind: str, version: int):
    """Decode the bytes of a data file of ``kind`` and ``version`` (never unpickles anything).

    Raises
    ------
    RefusedData
        When the bytes are not such a file: another kind of file (a pickle, say),
        another format or version, or a damaged one; ``reason`` says which.
    """
    blob = bytes(blob)
    if not blob.startswith(MAGIC):
        if looks_like_pickle(blob):
            raise RefusedData("it is a pickle, which selectkit never opens because loading one can run code")
        raise RefusedData("it does not start like one")
    start = len(MAGIC) + _LENGTH.size
    if len(blob) < start:
        raise RefusedData("it is cut short")
    (length,) = _LENGTH.unpack_from(blob, len(MAGIC))
    if length > len(blob) - start:
        raise RefusedData("it is cut short")
    try:
        document = json.loads(blob[start: start + length].decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError) as err:
        raise RefusedData("its contents are damaged") from err
    if not isinstance(document, dict) or document.get("format") != kind:
        found = document.get("format") if isinstance(document, dict) else None
        raise RefusedData(f"it holds {str(found)[:40]!r}, not {kind!r}")
    if document.get("version") != version:
        raise RefusedData(f"it is format version {str(document.get('version'))[:20]}; this selectkit reads "
                          f"version {version}")
    count = document.get("arrays")
    if not isinstance(count, int) or isinstance(count, bool) or count < 0:
        raise RefusedData("its contents are damaged")
    stream = io.BytesIO(blob)
    stream.seek(start + length)
    arrays = []
    try:
        for _ in range(count):
            array = np.lib.format.read_array(stream, allow_pickle=False)
            if array.dtype.kind not in _ARRAY_KINDS:
                raise RefusedData(f"it holds an array of dtype {array.dtype}")
            arrays.append(array)
    except RefusedData:
        raise
    except (ValueError, OSError, EOFError, SyntaxError, TypeError) as err:
        raise RefusedData("its arrays are damaged") from err
    if stream.tell() != len(blob):
        raise RefusedData("it has bytes after its end")
    try:
        return _Decoder(arrays).value(document.get("value"))
    except RecursionError as err:
        raise RefusedData("its contents are nested too deeply") from err
    except (TypeError, ValueError, KeyError, AttributeError) as err:
        if isinstance(err, RefusedData):
            raise
        raise RefusedData(f"its contents are damaged ({type(err).__name__})") from err
