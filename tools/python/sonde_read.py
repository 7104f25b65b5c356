"""Read Sonde snapshots and exports from Python: standard library + NumPy; xarray when installed.

    import sonde_read
    rec = sonde_read.open("snapshots/attend")        # a snapshot folder, or an export folder
    rec.layer_names                                  # recorded tensors, in manifest order
    acts = rec.activations("relu1")                  # numpy array [N, C, H, W], float32 or float16 as stored
    means = rec.channel_means("relu1")               # numpy array [N, C], float32
    da = rec.dataarray("relu1")                      # xarray.DataArray with stimulus/id/labels coordinates
    rec.stimuli["id"], rec.stimuli["labels"], rec.modulation

Layers of a modulated snapshot whose file lives in the baseline (manifest ``"from": "baseline"``) are
read from the baseline folder named in the manifest; the baseline must be the one the snapshot was
recorded from (its manifest's SHA-256 is checked). Every file is checked against the size and SHA-256
its manifest (or export.json) lists before its values are returned (``verify="size"`` checks sizes only).

Snapshot layer files are Arrow IPC files. Without pyarrow they are read by the small reader below, which
understands exactly the columns Sonde writes (int32, float16/32/64, utf8, list, fixed-size list; no
nulls, no dictionaries) -- Arrow columnar format specification, "IPC File Format" and "Buffer layout",
with the flatbuffer schemas File.fbs, Message.fbs and Schema.fbs. Compressed layer files (snapshot format
3, ``record --compress lz4|zstd``: Arrow's buffer compression, "Compression" in the same specification)
are read when the codec's module is installed -- ``lz4`` (Debian python3-lz4) for LZ4 frames,
``zstandard`` (Debian python3-zstandard) for ZSTD -- and refused in one line otherwise (``sonde export``
writes plain .npy files). Channel means of a format-3 snapshot come from the layer's own channel-means
file (manifest ``means``), checked against its own size and SHA-256, without reading the activations. ``engine="pyarrow"``
reads them with pyarrow instead; that path is NOT tested in Sonde's CI (pyarrow is not packaged for
Debian 12). Exports are plain .npy files, memory-mapped by ``numpy.load(mmap_mode="r")``.

Run ``python3 sonde_read.py FOLDER`` to print what a folder holds.
"""

import builtins
import hashlib
import json
import os
import struct
import sys

import numpy as np

__all__ = ["open", "open_snapshot", "open_export", "read_arrow_file", "axis_names", "SondeReadError"]

SNAPSHOT_FORMATS = (2, 3)
EXPORT_FORMAT = 1


class SondeReadError(Exception):
    """A folder or file that is not what Sonde wrote, or that fails its integrity check."""


# --------------------------------------------------------------------------------------------------
# A minimal Arrow IPC file reader (flatbuffers by hand).

class _Table:
    """A flatbuffer table at `pos` of `buf`: a signed offset back to its vtable, then its fields."""

    def __init__(self, buf, pos):
        self.buf = buf
        self.pos = pos
        self.vtable = pos - struct.unpack_from("<i", buf, pos)[0]
        self.vtable_size = struct.unpack_from("<H", buf, self.vtable)[0]

    def _offset(self, field):
        at = 4 + 2 * field
        return struct.unpack_from("<H", self.buf, self.vtable + at)[0] if at < self.vtable_size else 0

    def scalar(self, field, fmt, default=0):
        o = self._offset(field)
        return struct.unpack_from(fmt, self.buf, self.pos + o)[0] if o else default

    def table(self, field):
        o = self._offset(field)
        if not o:
            return None
        at = self.pos + o
        return _Table(self.buf, at + struct.unpack_from("<I", self.buf, at)[0])

    def vector(self, field):
        """(start of the elements, element count); (0, 0) when absent."""
        o = self._offset(field)
        if not o:
            return 0, 0
        at = self.pos + o
        start = at + struct.unpack_from("<I", self.buf, at)[0]
        return start + 4, struct.unpack_from("<I", self.buf, start)[0]

    def string(self, field):
        start, n = self.vector(field)
        return bytes(self.buf[start:start + n]).decode("utf-8")

    def tables(self, field):
        start, n = self.vector(field)
        return [_Table(self.buf, start + 4 * i + struct.unpack_from("<I", self.buf, start + 4 * i)[0]) for i in range(n)]


def _root(buf):
    return _Table(buf, struct.unpack_from("<I", buf, 0)[0])


# Schema.fbs: Type union ids and FloatingPoint precisions
_INT, _FLOAT, _UTF8, _LIST, _STRUCT, _FIXED_SIZE_LIST = 2, 3, 5, 12, 13, 16
_FLOAT_DTYPES = {0: "<f2", 1: "<f4", 2: "<f8"}
_RECORD_BATCH = 3  # Message.fbs MessageHeader


class _Field:
    def __init__(self, table):
        self.name = table.string(0)
        self.type_id = table.scalar(2, "<B")
        self.type = table.table(3)
        self.children = [_Field(t) for t in table.tables(5)]
        self.metadata = {kv.string(0): kv.string(1) for kv in table.tables(6)}


def _read_exact(f, position, length, path):
    f.seek(position)
    data = f.read(length)
    if len(data) != length:
        raise SondeReadError(f"{path}: unexpected end of file at byte {position + len(data)} (truncated?)")
    return data


def read_arrow_file(path, columns=None):
    """Reads an Arrow IPC file as written by Sonde.

    Returns (schema fields, list of batches); each batch is a dict column name -> value: a NumPy array
    for int/float columns, [rows, size] for a fixed-size list of numbers, a list of str for utf8, a list
    of lists for list columns. `columns`: names to read (default all); the bytes of the others are not
    read at all. Raises SondeReadError for anything else (nulls, compression, dictionaries, other
    types) -- use engine="pyarrow" for general Arrow files.
    """
    with builtins.open(path, "rb") as f:
        size = os.fstat(f.fileno()).st_size
        if size < 18 or _read_exact(f, 0, 6, path) != b"ARROW1" or _read_exact(f, size - 6, 6, path) != b"ARROW1":
            raise SondeReadError(f"{path} is not an Arrow IPC file (no ARROW1 magic)")
        footer_length = struct.unpack("<i", _read_exact(f, size - 10, 4, path))[0]
        if footer_length <= 0 or footer_length > size - 18:
            raise SondeReadError(f"{path}: bad Arrow footer length {footer_length}")
        footer = _root(_read_exact(f, size - 10 - footer_length, footer_length, path))
        schema = footer.table(1)
        fields = [_Field(t) for t in schema.tables(1)]
        if footer.vector(2)[1] != 0:
            raise SondeReadError(f"{path}: dictionary-encoded columns are not supported (Sonde writes none)")
        start, count = footer.vector(3)
        batches = []
        for b in range(count):
            # Block struct: offset int64, metaDataLength int32, (pad), bodyLength int64
            offset, meta_length, body_length = struct.unpack_from("<qi4xq", footer.buf, start + 24 * b)
            if offset + meta_length + body_length > size:
                raise SondeReadError(f"{path}: record batch {b} runs past the end of the file (truncated?)")
            meta = _read_exact(f, offset, meta_length, path)
            # encapsulated message: 0xFFFFFFFF continuation, int32 length, flatbuffer
            at = 8 if struct.unpack_from("<i", meta, 0)[0] == -1 else 4
            message = _root(meta[at:])
            if message.scalar(1, "<B") != _RECORD_BATCH:
                raise SondeReadError(f"{path}: block {b} is not a record batch")
            header = message.table(2)
            compression = header.table(3)  # BodyCompression: codec (0 LZ4_FRAME, 1 ZSTD), method (0 BUFFER)
            codec = None
            if compression is not None:
                codec = compression.scalar(0, "<b")
                if compression.scalar(1, "<b") != 0 or codec not in _CODECS:
                    raise SondeReadError(f"{path}: record batch {b} uses a compression this reader does not know (codec {codec})")
            rows = header.scalar(0, "<q")
            n_start, n_count = header.vector(1)
            nodes = iter([struct.unpack_from("<qq", header.buf, n_start + 16 * i) for i in range(n_count)])
            b_start, b_count = header.vector(2)
            buffers = iter([struct.unpack_from("<qq", header.buf, b_start + 16 * i) for i in range(b_count)])
            body_start = offset + meta_length

            def fetch(at, length, body_start=body_start, body_length=body_length, codec=codec, b=b):
                """The bytes of one body buffer (`length` as the message lists it), decompressed when the batch is."""
                if at < 0 or at + length > body_length:
                    raise SondeReadError(f"{path}: a buffer of record batch {b} lies outside its body")
                data = _read_exact(f, body_start + at, length, path)
                return _decompress(data, codec, path, b) if codec is not None else data

            batch = {}
            for field in fields:
                if columns is None or field.name in columns:
                    batch[field.name] = _decode(field, nodes, buffers, fetch, path)
                else:
                    _skip(field, nodes, buffers)
            batch["__rows__"] = rows
            batches.append(batch)
    return fields, batches


# BodyCompression codecs (Message.fbs CompressionType) -> (name, Python module, Debian package)
_CODECS = {0: ("lz4", "lz4.frame", "python3-lz4"), 1: ("zstd", "zstandard", "python3-zstandard")}


def _decompress(data, codec, path, batch):
    """One buffer of a compressed batch: int64 uncompressed length (-1: stored as is), then the codec's frame."""
    if len(data) == 0:
        return data
    if len(data) < 8:
        raise SondeReadError(f"{path}: a compressed buffer of record batch {batch} has no room for its length prefix")
    length = struct.unpack_from("<q", data, 0)[0]
    if length == -1:
        return data[8:]
    name, module, package = _CODECS[codec]
    try:
        if codec == 0:
            import lz4.frame
            out = lz4.frame.decompress(data[8:])
        else:
            import zstandard
            out = zstandard.ZstdDecompressor().decompress(data[8:], max_output_size=length)
    except ImportError:
        raise SondeReadError(f"{path} is compressed with {name}, and Python module {module} is not installed: install it (Debian {package}), or convert the snapshot with `sonde export`") from None
    if len(out) != length:
        raise SondeReadError(f"{path}: a {name} buffer of record batch {batch} decompressed to {len(out)} bytes, its prefix says {length}")
    return out


# buffers per field after the validity bitmap (Arrow columnar format, "Buffer layout"); children follow
_OWN_BUFFERS = {_INT: 1, _FLOAT: 1, _UTF8: 2, _LIST: 1, _STRUCT: 0, _FIXED_SIZE_LIST: 0}


def _skip(field, nodes, buffers):
    """Consumes a column's nodes and buffers without reading its bytes."""
    next(nodes)
    next(buffers)
    for _ in range(_OWN_BUFFERS.get(field.type_id, 0)):
        next(buffers)
    for child in field.children:
        _skip(child, nodes, buffers)


def _decode(field, nodes, buffers, fetch, path):
    length, nulls = next(nodes)
    next(buffers)  # validity bitmap
    if nulls:
        raise SondeReadError(f"{path}: column {field.name!r} has {nulls} nulls (Sonde writes none)")
    t = field.type_id

    def values(dtype, count):
        offset, size = next(buffers)
        item = np.dtype(dtype).itemsize
        data = fetch(offset, size)
        if count * item > len(data):
            raise SondeReadError(f"{path}: column {field.name!r} holds {len(data)} bytes, fewer than {count} values")
        return np.frombuffer(data, dtype=dtype, count=count)

    if t == _INT:
        width, signed = field.type.scalar(0, "<i"), field.type.scalar(1, "<?", False)
        return values(f"<{'i' if signed else 'u'}{width // 8}", length)
    if t == _FLOAT:
        return values(_FLOAT_DTYPES[field.type.scalar(0, "<h")], length)
    if t == _UTF8:
        offsets = values("<i4", length + 1)
        data_offset, data_size = next(buffers)
        data = fetch(data_offset, data_size) if length else b""
        if length and (int(offsets[0]) < 0 or int(offsets[-1]) > len(data) or np.any(np.diff(offsets) < 0)):
            raise SondeReadError(f"{path}: column {field.name!r} has offsets outside its data")
        return [data[offsets[i]:offsets[i + 1]].decode("utf-8") for i in range(length)]
    if t == _LIST:
        offsets = values("<i4", length + 1)
        child = _decode(field.children[0], nodes, buffers, fetch, path)
        return [list(child[offsets[i]:offsets[i + 1]]) for i in range(length)]
    if t == _FIXED_SIZE_LIST:
        width = field.type.scalar(0, "<i")
        child = _decode(field.children[0], nodes, buffers, fetch, path)
        return np.asarray(child).reshape(length, width)
    if t == _STRUCT:
        return {c.name: _decode(c, nodes, buffers, fetch, path) for c in field.children}
    raise SondeReadError(f"{path}: column {field.name!r} has Arrow type id {t}, which this reader does not handle; use engine='pyarrow'")


def _read_layer_pyarrow(path):  # untested in Sonde's CI: pyarrow is not packaged for Debian 12
    import pyarrow as pa

    table = pa.ipc.open_file(pa.memory_map(path)).read_all()
    out = {"index": table.column("index").to_numpy(), "__rows__": table.num_rows}
    for name in ("channel_mean", "activation"):
        if name in table.column_names:
            column = table.column(name).combine_chunks()
            out[name] = column.flatten().to_numpy(zero_copy_only=False).reshape(table.num_rows, column.type.list_size)
    return [out]


# --------------------------------------------------------------------------------------------------
# Integrity

def _sha256(path):
    digest = hashlib.sha256()
    with builtins.open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 22), b""):
            digest.update(chunk)
    return digest.hexdigest()


def _check_file(path, expected_bytes, expected_sha256, verify, what):
    if not os.path.isfile(path):
        raise SondeReadError(f"{what} {path} does not exist")
    if expected_bytes is not None and os.path.getsize(path) != expected_bytes:
        raise SondeReadError(f"{what} {path} holds {os.path.getsize(path)} bytes, its manifest says {expected_bytes} (damaged; run `sonde check`)")
    if verify == "sha256" and expected_sha256 is not None and _sha256(path) != expected_sha256:
        raise SondeReadError(f"{what} {path} does not have the SHA-256 its manifest lists (damaged; run `sonde check`)")


def _inside(root, relative, what):
    """`root`/`relative`, refusing absolute paths, `..`, and links that lead out of `root` (as Sonde does)."""
    if os.path.isabs(relative) or ".." in relative.replace("\\", "/").split("/"):
        raise SondeReadError(f"{what} {relative!r} must be a relative path inside {root}")
    path = os.path.join(root, relative)
    real_root = os.path.realpath(root)
    if os.path.commonpath([real_root, os.path.realpath(path)]) != real_root:
        raise SondeReadError(f"{what} {path} is a link that leads out of {root}")
    return path


def axis_names(rank, layout=None):
    """Axis names of a layer's activation array, stimulus first, from the layer's layout: token, feature
    for tokens [T, D]; y, x, channel for channels-last maps; head on the heads axis of attention
    internals; otherwise the channel axis is the first per-stimulus axis, a three-axis tensor is
    channel, y, x (NCHW) and other axes are named by position. The same rule as `sonde export`
    (src/export/export-description.ts)."""
    if rank == 0:
        return ["stimulus"]
    kind = (layout or {}).get("kind")
    axis = (layout or {}).get("featureAxis")
    if kind == "tokens" and rank == 2:
        return ["stimulus", "token", "feature"]
    if kind == "channels-last" and rank == 3 and axis == 2:
        return ["stimulus", "y", "x", "channel"]
    if kind == "heads" and axis is not None:
        return ["stimulus"] + ["head" if k == axis else f"axis{k + 1}" for k in range(rank)]
    if rank == 3:
        return ["stimulus", "channel", "y", "x"]
    return ["stimulus", "channel"] + [f"axis{k + 2}" for k in range(rank - 1)]


def feature_count(shape, layout=None):
    """Channels (features) of a per-stimulus shape: along the layout's feature axis (src/graph/layout.ts),
    the first axis for snapshots recorded before layouts, 1 for a scalar."""
    if not shape:
        return 1
    axis = 0 if layout is None else layout.get("featureAxis")
    return 1 if axis is None else shape[axis]


# --------------------------------------------------------------------------------------------------
# Snapshots and exports

class _Recording:
    """What `open` returns: layers with activations and channel means, and their coordinates."""

    kind = ""
    folder = ""
    layers = ()  # list of dicts: name, op, depth, shape, dtype, keep, source ('snapshot' or 'baseline')
    stimuli = None  # dict: index (int64 array), id (list of str), labels (list of tuples of str)
    modulation = None
    categories = ()

    @property
    def layer_names(self):
        return [layer["name"] for layer in self.layers]

    def layer(self, name):
        for layer in self.layers:
            if layer["name"] == name:
                return layer
        close = [n for n in self.layer_names if name.lower() in n.lower() or n.lower() in name.lower()][:5]
        raise KeyError(f"layer {name!r} is not in {self.folder} ({len(self.layers)} layers)" + (f"; close: {', '.join(close)}" if close else ""))

    def dataarray(self, name, what="activation"):
        """The layer as an xarray.DataArray: dims from `axis_names` ([stimulus, channel] for
        what="channel_means"), coordinates stimulus (global index), id and labels along the stimulus
        axis, channel numbers; attrs name the layer, its source and the modulation (JSON)."""
        import xarray as xr

        layer = self.layer(name)
        data = self.activations(name) if what == "activation" else self.channel_means(name)
        dims = axis_names(len(layer["shape"]), layer.get("layout")) if what == "activation" else ["stimulus", "channel"]
        labels = np.empty(len(self.stimuli["labels"]), dtype=object)
        labels[:] = [tuple(l) for l in self.stimuli["labels"]]
        coords = {"stimulus": np.asarray(self.stimuli["index"]), "id": ("stimulus", np.asarray(self.stimuli["id"], dtype=object)), "labels": ("stimulus", labels)}
        for axis, dim in enumerate(dims):
            if dim in ("channel", "feature", "head", "token"):
                coords[dim] = np.arange(data.shape[axis])
        attrs = {"layer": name, "op": layer["op"], "depth": layer["depth"], "dtype": layer["dtype"], "source": layer["source"],
                 "modulation": json.dumps(self.modulation), "folder": self.folder}
        return xr.DataArray(data, dims=dims, coords=coords, name=name, attrs=attrs)

    def __repr__(self):
        return f"<sonde {self.kind} {self.folder}: {len(self.stimuli['id'])} stimuli, {len(self.layers)} layers{', modulated' if self.modulation else ''}>"


class Snapshot(_Recording):
    """A snapshot folder (manifest.json, stimuli.arrow, layers/*.arrow)."""

    kind = "snapshot"

    def __init__(self, folder, verify="sha256", engine="auto"):
        if verify not in ("sha256", "size"):
            raise ValueError(f"verify={verify!r}: use 'sha256' or 'size'")
        if engine == "auto":
            try:
                import pyarrow  # noqa: F401
                engine = "pyarrow"
            except ImportError:
                engine = "numpy"
        if engine not in ("numpy", "pyarrow"):
            raise ValueError(f"engine={engine!r}: use 'auto', 'numpy' or 'pyarrow'")
        self.engine = engine
        self.verify = verify
        self.folder = os.path.abspath(folder)
        path = os.path.join(self.folder, "manifest.json")
        if not os.path.isfile(path):
            raise SondeReadError(f"{folder} is not a snapshot (no manifest.json)")
        with builtins.open(path, "rb") as f:
            self.manifest = json.loads(f.read().decode("utf-8"))
        if self.manifest.get("format") not in SNAPSHOT_FORMATS:
            raise SondeReadError(f"{path} has format {self.manifest.get('format')!r}; this reader reads formats {' and '.join(map(str, SNAPSHOT_FORMATS))}")
        if not self.manifest.get("complete"):
            raise SondeReadError(f"snapshot {folder} is incomplete (the recording did not finish)")
        baseline = self.manifest.get("baseline")
        self.baseline_folder = os.path.normpath(os.path.join(self.folder, baseline["path"])) if baseline else None
        self.modulation = self.manifest.get("modulation")
        self.layers = [dict(l, source="baseline" if l.get("from") == "baseline" else "snapshot") for l in self.manifest["layers"]]
        shard = self.manifest.get("shard")
        self.first_index = shard["stimuli"][0] if shard else 0
        self._baseline_checked = False
        stimuli_path = os.path.join(self.folder, "stimuli.arrow")
        _, batches = read_arrow_file(stimuli_path)
        index = np.concatenate([np.asarray(b["index"], dtype=np.int64) for b in batches]) if batches else np.zeros(0, np.int64)
        self.stimuli = {
            "index": index,
            "id": [i for b in batches for i in b["id"]],
            "labels": [tuple(l) for b in batches for l in b["labels"]],
        }
        if len(self.stimuli["id"]) != self.manifest["stimuli"]["count"]:
            raise SondeReadError(f"{folder}: stimuli.arrow has {len(self.stimuli['id'])} rows but the manifest says {self.manifest['stimuli']['count']}")
        self.categories = list(self.manifest["stimuli"].get("categories") or sorted({c for l in self.stimuli["labels"] for c in l}))

    def _file(self, layer):
        if layer.get("from") == "baseline":
            if not self.baseline_folder:
                raise SondeReadError(f"{self.folder}: layer {layer['name']!r} comes from a baseline but the manifest names none")
            if not self._baseline_checked:
                manifest = os.path.join(self.baseline_folder, "manifest.json")
                if not os.path.isfile(manifest):
                    raise SondeReadError(f"{self.folder} reads layers from its baseline {self.baseline_folder}, which has no manifest.json (moved or deleted?)")
                if _sha256(manifest) != self.manifest["baseline"]["manifestSha256"]:
                    raise SondeReadError(f"the baseline {self.baseline_folder} of {self.folder} changed since the snapshot was recorded (manifest SHA-256 differs)")
                self._baseline_checked = True
            return _inside(self.baseline_folder, layer["file"], f"baseline layer {layer['name']!r} file")
        return _inside(self.folder, layer["file"], f"layer {layer['name']!r} file")

    def _columns(self, name, want_activation):
        layer = self.layer(name)
        path = self._file(layer)
        means_file = layer.get("means")
        if not want_activation and means_file:
            # format 3: the layer's channel-means file, checked on its own; the activations are not read
            path = self._file(dict(layer, file=means_file["file"]))
            _check_file(path, means_file.get("bytes"), means_file.get("sha256"), self.verify, f"channel-means file of {name!r}:")
        else:
            _check_file(path, layer.get("bytes"), layer.get("sha256"), self.verify, f"layer file of {name!r}:")
        wanted = ["index", "channel_mean"] + (["activation"] if want_activation else [])
        batches = _read_layer_pyarrow(path) if self.engine == "pyarrow" else read_arrow_file(path, columns=wanted)[1]
        n = len(self.stimuli["id"])
        shape = list(layer["shape"])
        channels = feature_count(shape, layer.get("layout"))
        means = np.empty((n, channels), dtype=np.float32)
        acts = np.empty([n] + shape, dtype=np.float16 if layer["dtype"] == "float16" else np.float32) if want_activation else None
        seen = np.zeros(n, dtype=bool)
        for batch in batches:
            rows = np.asarray(batch["index"], dtype=np.int64) - self.first_index
            if rows.size and (rows.min() < 0 or rows.max() >= n):
                raise SondeReadError(f"{path}: stimulus index outside {self.first_index}..{self.first_index + n - 1}")
            means[rows] = batch["channel_mean"]
            if acts is not None:
                acts[rows] = np.asarray(batch["activation"]).reshape([len(rows)] + shape)
            seen[rows] = True
        if not seen.all():
            raise SondeReadError(f"{path}: {int((~seen).sum())} of {n} stimuli have no row")
        return means, acts

    def activations(self, name):
        """[N, *shape] activations of a layer, float32 or float16 as stored, rows in stimulus order."""
        if self.layer(name)["keep"] != "full":
            raise SondeReadError(f"layer {name!r} of {self.folder} kept channel means only (recorded with --keep channels); use channel_means()")
        return self._columns(name, True)[1]

    def channel_means(self, name):
        """[N, C] spatial channel means of a layer (float32)."""
        return self._columns(name, False)[0]


class Export(_Recording):
    """An export folder written by `sonde export` (export.json, layers/*.npy)."""

    kind = "export"

    def __init__(self, folder, verify="sha256", mmap=True):
        if verify not in ("sha256", "size"):
            raise ValueError(f"verify={verify!r}: use 'sha256' or 'size'")
        self.folder = os.path.abspath(folder)
        self.verify = verify
        self.mmap = mmap
        path = os.path.join(self.folder, "export.json")
        if not os.path.isfile(path):
            raise SondeReadError(f"{folder} is not an export (no export.json)")
        with builtins.open(path, "rb") as f:
            self.description = json.loads(f.read().decode("utf-8"))
        if self.description.get("kind") != "sonde-export" or self.description.get("format") != EXPORT_FORMAT:
            raise SondeReadError(f"{path} is not a Sonde export of format {EXPORT_FORMAT}")
        if not self.description.get("complete"):
            raise SondeReadError(f"export {folder} is incomplete (the export did not finish); run sonde export again")
        self.modulation = self.description.get("modulation")
        self.layers = self.description["layers"]
        s = self.description["stimuli"]
        self.stimuli = {"index": np.asarray(s["index"], dtype=np.int64), "id": list(s["id"]), "labels": [tuple(l) for l in s["labels"]]}
        self.categories = list(s.get("categories") or [])

    def _load(self, entry):
        path = _inside(self.folder, entry["file"], "export file")
        _check_file(path, entry.get("bytes"), entry.get("sha256"), self.verify, "export file")
        array = np.load(path, mmap_mode="r" if self.mmap else None, allow_pickle=False)
        if list(array.shape) != list(entry["shape"]):
            raise SondeReadError(f"{path} has shape {list(array.shape)}, export.json says {entry['shape']}")
        return array

    def activations(self, name):
        """[N, *shape] activations (memory-mapped, read-only, unless mmap=False)."""
        layer = self.layer(name)
        if layer["activation"] is None:
            raise SondeReadError(f"layer {name!r} of {self.folder} kept channel means only; use channel_means()")
        return self._load(layer["activation"])

    def channel_means(self, name):
        """[N, C] spatial channel means (float32)."""
        return self._load(self.layer(name)["channelMeans"])


def open_snapshot(folder, verify="sha256", engine="auto"):
    """Opens a snapshot folder. engine: 'numpy' (the reader in this file), 'pyarrow' (untested here), or
    'auto' (pyarrow when installed). verify: 'sha256' (default) or 'size'."""
    return Snapshot(folder, verify=verify, engine=engine)


def open_export(folder, verify="sha256", mmap=True):
    """Opens an export folder (`sonde export`); arrays are memory-mapped unless mmap=False."""
    return Export(folder, verify=verify, mmap=mmap)


def open(folder, **options):  # noqa: A001 -- sonde_read.open, like the module's one entry point
    """Opens a snapshot or an export folder, whichever it is."""
    if os.path.isfile(os.path.join(folder, "export.json")):
        return open_export(folder, **options)
    return open_snapshot(folder, **options)


if __name__ == "__main__":
    if len(sys.argv) != 2:
        sys.exit("usage: python3 sonde_read.py SNAPSHOT_OR_EXPORT_FOLDER")
    try:
        rec = open(sys.argv[1])
    except SondeReadError as error:
        sys.exit(f"sonde_read: {error}")
    print(rec)
    for layer in rec.layers:
        print(f"  {layer['name']}: {layer['shape']} {layer['dtype']} {layer['keep']}{' (from the baseline)' if layer['source'] == 'baseline' else ''}")
