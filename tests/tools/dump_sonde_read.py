"""Test helper for tests/tools/sonde-read.test.ts: opens each folder given with tools/python/sonde_read.py
and writes what it read to OUT, so the test can compare it with Sonde's own reader:
OUT/<k>/<layer-index>.acts.npy (float32; float16 widened exactly), OUT/<k>/<layer-index>.means.npy, and
OUT/summary.json (stimulus coordinates, layer names, dtypes, and the xarray DataArray's dims/coords when
xarray is installed). Usage: python3 dump_sonde_read.py OUT ENGINE FOLDER...
"""
import json
import os
import sys

here = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(here, "..", "..", "tools", "python"))
import numpy as np  # noqa: E402
import sonde_read  # noqa: E402

try:
    import xarray  # noqa: F401
    have_xarray = True
except ImportError:
    have_xarray = False

out, engine, folders = sys.argv[1], sys.argv[2], sys.argv[3:]
summary = {"xarray": have_xarray, "numpy": np.__version__, "folders": []}
for k, folder in enumerate(folders):
    options = {} if os.path.isfile(os.path.join(folder, "export.json")) else {"engine": engine}
    rec = sonde_read.open(folder, **options)
    os.makedirs(os.path.join(out, str(k)), exist_ok=True)
    entry = {"kind": rec.kind, "engine": getattr(rec, "engine", None), "ids": rec.stimuli["id"], "labels": [list(l) for l in rec.stimuli["labels"]],
             "index": [int(i) for i in rec.stimuli["index"]], "layers": [], "modulated": rec.modulation is not None}
    for j, layer in enumerate(rec.layers):
        name = layer["name"]
        item = {"name": name, "source": layer["source"]}
        means = rec.channel_means(name)
        item["meansDtype"] = str(means.dtype)
        np.save(os.path.join(out, str(k), f"{j}.means.npy"), np.ascontiguousarray(means, dtype=np.float32))
        if layer["keep"] == "full":
            acts = rec.activations(name)
            item["dtype"] = str(acts.dtype)
            item["shape"] = list(acts.shape)
            item["memmap"] = isinstance(acts, np.memmap)
            np.save(os.path.join(out, str(k), f"{j}.acts.npy"), np.ascontiguousarray(acts, dtype=np.float32))
            if have_xarray:
                da = rec.dataarray(name)
                item["dataarray"] = {"dims": list(da.dims), "shape": list(da.shape), "stimulus": [int(v) for v in da["stimulus"].values],
                                     "id": [str(v) for v in da["id"].values], "labels": [list(v) for v in da["labels"].values],
                                     "channel": [int(v) for v in da["channel"].values] if "channel" in da.coords else None, "layer": da.attrs["layer"],
                                     "modulation": json.loads(da.attrs["modulation"]),
                                     "equal": bool(np.array_equal(da.values, np.asarray(acts), equal_nan=True))}
        if have_xarray:
            dm = rec.dataarray(name, what="channel_means")
            item["meansDataarray"] = {"dims": list(dm.dims), "shape": list(dm.shape),
                                      "equal": bool(np.array_equal(dm.values, np.asarray(means), equal_nan=True))}
        entry["layers"].append(item)
    summary["folders"].append(entry)
with open(os.path.join(out, "summary.json"), "w") as f:
    json.dump(summary, f)
