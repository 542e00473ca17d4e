"""Reuse the ideal cubes of an earlier run when what they depend on has not changed.

An ideal cube depends on the cloud (the ``[cloud]`` table and the snapshot file's content),
on ``[sky]`` (less ``object`` and ``beyond_box``, which only label or observe), on
``[channels]``, on its own ``[[tracer]]`` table (less ``name``; a ``datafile`` by its
content) and on the synth version that made it. When the band is automatic (no
``velocity_min_kms``), it also depends on the lines of every tracer, since the band covers
them all. Each part is hashed (sha256 of canonical JSON; files by the sha256 of their bytes)
and the hash of the parts is the cube's key. A run writes the key into every ideal, tau and
column FITS file it makes (:data:`KEY_CARD`, the parts in :data:`PART_CARDS`) and the sha256
of the file's data (:data:`DATA_CARD`).

``synth run CONFIG --out DIR --reuse EARLIER`` looks for cubes with the same key in the
earlier run folder(s): a cube whose key, data hash, shape and summary entry all check out is
a hit and is copied into the new run (nothing is written outside the new run folder); any
other case (no such folder, no matching cube, a cube that does not read or whose data changed)
is a miss, logged with its reason, and the tracer is synthesised as usual.
"""

import glob
import hashlib
import json
import os
from dataclasses import dataclass

import numpy as np

from .errors import ConfigError

__all__ = ["KEY_CARD", "DATA_CARD", "PART_CARDS", "ideal_key", "key_cards", "data_card",
           "file_hash", "as_written", "Hit", "find_reusable", "check_reuse_folders"]

#: FITS card holding the key of an ideal cube (and of its tau cube and column map)
KEY_CARD = "IDEALKEY"
#: FITS card holding the sha256 (first 32 hex digits) of the file's data as stored
DATA_CARD = "DATAHASH"
#: FITS cards holding the hash of each part of the key (to say which part changed)
PART_CARDS = {"cloud": "KEYCLOUD", "sky": "KEYSKY", "channels": "KEYCHAN",
              "tracer": "KEYTRAC", "band": "KEYBAND", "version": "KEYVERS"}
#: what each part is called in a log line
_PART_NAMES = {"cloud": "[cloud] or the snapshot file's content", "sky": "[sky]",
               "channels": "[channels]", "tracer": "the [[tracer]] table",
               "band": "the lines of the other tracers (they set the automatic band)",
               "version": "the synth version"}
#: [sky] keys that do not change an ideal cube
_SKY_IGNORED = ("object", "beyond_box")
#: [[tracer]] keys that do not change an ideal cube
_TRACER_IGNORED = ("name",)
_CHUNK = 8 << 20


def _canonical(value):
    """JSON-able value with numbers as floats (1 and 1.0 are the same physics)."""
    if isinstance(value, dict):
        return {str(k): _canonical(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_canonical(v) for v in value]
    if isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool):
        return float(value)
    return value


def _hash(obj, n=16):
    blob = json.dumps(_canonical(obj), sort_keys=True, default=str).encode()
    return hashlib.sha256(blob).hexdigest()[:n]


def file_hash(path):
    """sha256 of a file's bytes (of every file under a folder, with their relative names);
    "missing" if it cannot be read. The content, not the time stamp, decides."""
    h = hashlib.sha256()
    path = os.fspath(path)
    files = [path] if not os.path.isdir(path) else sorted(
        os.path.join(root, f) for root, _, names in os.walk(path) for f in names)
    try:
        for f in files:
            if f != path:
                h.update(os.path.relpath(f, path).encode() + b"\0")
            with open(f, "rb") as fh:
                for block in iter(lambda: fh.read(_CHUNK), b""):
                    h.update(block)
    except OSError:
        return "missing"
    return h.hexdigest()


def _tracer_part(tr, hashes):
    part = {k: v for k, v in tr.items() if k not in _TRACER_IGNORED}
    if part.get("datafile"):
        part["datafile"] = hashes(part["datafile"])
    return part


def ideal_key(conf, tracer, _hashes=None):
    """(key, {part: hash}) of the ideal cube of ``tracer`` (a [[tracer]] table of ``conf``)."""
    from . import __version__
    memo = _hashes if _hashes is not None else {}

    def hashes(path):
        if path not in memo:
            memo[path] = file_hash(path)
        return memo[path]

    cloud = dict(conf["cloud"])
    if cloud["source"] != "demo":
        cloud["source"] = hashes(cloud["source"])
    chan = conf["channels"]
    band = None
    if chan["velocity_min_kms"] is None or chan["velocity_max_kms"] is None:
        band = sorted(_hash({k: t.get(k) for k in ("species", "transition", "hyperfine")}
                            | {"datafile": t["datafile"] and hashes(t["datafile"])})
                      for t in conf["tracer"])
    parts = {"cloud": _hash(cloud),
             "sky": _hash({k: v for k, v in conf["sky"].items() if k not in _SKY_IGNORED}),
             "channels": _hash(chan), "tracer": _hash(_tracer_part(tracer, hashes)),
             "band": _hash(band), "version": _hash(__version__)}
    return _hash(parts, 32), parts


def key_cards(key, parts):
    """The FITS cards that record a key and its parts."""
    return {KEY_CARD: key, **{PART_CARDS[p]: h for p, h in parts.items()}}


def data_card(data):
    """{DATA_CARD: sha256 of the data as a FITS file stores it (big-endian float32)}."""
    arr = np.ascontiguousarray(np.asarray(data, dtype=">f4"))
    return {DATA_CARD: hashlib.sha256(arr.tobytes()).hexdigest()[:32]}


#: meta cards of an ideal cube (synth.transfer.synthesize) restored when it is read back
_META = ("BUNIT", "LINE", "EXCIT", "HYPERFIN", "ABUND", "DISTPC", "LOS", "TBG", "TAUKIND")


def as_written(cube):
    """The cube with the WCS and meta it has once written to FITS and read back (header
    values are printed to 14-17 digits), so a run observes the same cube whether it
    synthesised it or reused it."""
    from astropy.wcs import WCS
    from spectral_cube import SpectralCube
    header = cube.header
    meta = {k: v for k, v in cube.meta.items() if str(k).upper() in _META}
    return SpectralCube(data=cube.unmasked_data[:], wcs=WCS(header), meta=meta)


def _read_back(path, key, want_shape=None):
    """(data, header) of a file this cache wrote with ``key``; raises _Miss otherwise."""
    from astropy.io import fits
    try:  # our own file handle: astropy leaves its own open when a damaged file fails
        with open(path, "rb") as fh, fits.open(fh, memmap=False) as hdul:
            header = hdul[0].header.copy()
            data = np.array(hdul[0].data)
    except Exception as exc:  # any unreadable file is a miss, never a crash
        raise _Miss(f"{os.path.basename(path)} does not read ({type(exc).__name__})") from None
    if header.get(KEY_CARD) != key:
        raise _Miss(f"{os.path.basename(path)} has another {KEY_CARD}")
    if data.ndim == 0 or (want_shape is not None and data.shape[1:] != tuple(want_shape)):
        raise _Miss(f"{os.path.basename(path)} has the wrong shape {data.shape}")
    if data_card(data)[DATA_CARD] != header.get(DATA_CARD):
        raise _Miss(f"{os.path.basename(path)}: its data do not match its {DATA_CARD} "
                    "(the file was changed or damaged)")
    return data, header


class _Miss(Exception):
    """Why an earlier cube cannot be reused."""


@dataclass(frozen=True)
class Hit:
    """An earlier ideal cube (and its tau cube / column map) found for a key.

    ``result`` is a SynthesisResult built from the files; ``source`` the ideal cube's path;
    ``entry`` the earlier run's summary entry of that tracer."""

    source: str
    result: object
    entry: dict
    snapshot: dict


def _cube_from(data, header, unit):
    import astropy.units as u
    from astropy.wcs import WCS
    from spectral_cube import SpectralCube
    meta = {k: header[k] for k in _META if k in header}
    if isinstance(meta.get("HYPERFIN"), str):
        meta["HYPERFIN"] = meta["HYPERFIN"] == "True"
    q = u.Quantity(data.astype(np.float32), u.Unit(unit) if unit else u.dimensionless_unscaled,
                   copy=False)
    return SpectralCube(data=q, wcs=WCS(header), meta=meta)


def _load(path, key, summary, products):
    """A Hit for the earlier ideal cube ``path`` (its key already matched), or _Miss."""
    import astropy.units as u
    from .transfer.synthesize import SynthesisResult
    data, header = _read_back(path, key)
    name = os.path.basename(path)[:-len("_ideal.fits")]
    entry = (summary.get("tracers") or {}).get(name)
    if not isinstance(entry, dict) or "velocity_resolution" not in entry:
        raise _Miss(f"the earlier summary.json has no entry for tracer '{name}'")
    cube = _cube_from(data, header, "K")
    folder = os.path.dirname(path)
    tau = column = None
    if "tau" in products:
        tpath = os.path.join(folder, f"{name}_tau.fits")
        if not os.path.exists(tpath):
            raise _Miss(f"the earlier run wrote no {name}_tau.fits ([output] products)")
        tau = _cube_from(*_read_back(tpath, key, data.shape[1:]), "")
    if "column" in products:
        cpath = os.path.join(folder, f"{name}_column.fits")
        if not os.path.exists(cpath):
            raise _Miss(f"the earlier run wrote no {name}_column.fits ([output] products)")
        cdata, _ = _read_back(cpath, key)
        if cdata.shape != data.shape[1:]:
            raise _Miss(f"{name}_column.fits has the wrong shape {cdata.shape}")
        column = cdata.astype(np.float32) * u.cm**-2
    stats = {"velocity_resolution": entry["velocity_resolution"],
             "tau_max": entry.get("tau_max"), "tau_median_peak": entry.get("tau_median_peak")}
    result = SynthesisResult(cube, tau, column, dict(entry.get("excitation_info") or {}), stats)
    return Hit(path, result, entry, dict(summary.get("snapshot") or {}))


def check_reuse_folders(folders):
    """Refuse, in one line, a --reuse path that is a file (a folder that does not exist is
    a miss, reported when the run starts)."""
    for folder in folders or ():
        if os.path.exists(folder) and not os.path.isdir(folder):
            raise ConfigError(f"--reuse {folder}: is a file; give the folder of an earlier "
                              "run")


def _index(folder):
    """[(path, header)] of the ideal cubes in an earlier run folder, and its summary."""
    from astropy.io import fits
    out = []
    for path in sorted(glob.glob(os.path.join(glob.escape(folder), "*_ideal.fits"))):
        try:
            with open(path, "rb") as fh, fits.open(fh, memmap=False) as hdul:
                out.append((path, hdul[0].header.copy()))
        except Exception:  # a damaged header: not a candidate, named in the reason
            out.append((path, None))
    try:
        with open(os.path.join(folder, "summary.json"), encoding="utf-8") as fh:
            summary = json.load(fh)
    except (OSError, ValueError):
        summary = None
    return out, summary if isinstance(summary, dict) else None


def _nearest(candidates, parts):
    """The earlier cube sharing most parts of the key, and the parts that differ."""
    best, differ = None, None
    for path, header in candidates:
        if header is None or KEY_CARD not in header:
            continue
        d = [p for p, card in PART_CARDS.items() if header.get(card) != parts[p]]
        if differ is None or len(d) < len(differ):
            best, differ = path, d
    return best, differ


def _changed_keys(part, earlier_conf, conf, tracer, earlier_name):
    """"key: old -> new" texts of a section that differs from the earlier run's config."""
    if not isinstance(earlier_conf, dict):
        return []
    if part == "tracer":
        old = next((t for t in earlier_conf.get("tracer", []) if t.get("name") == earlier_name),
                   None)
        new = tracer
    elif part in ("cloud", "sky", "channels"):
        old, new = earlier_conf.get(part), conf[part]
    else:
        return []
    if not isinstance(old, dict):
        return []
    keys = sorted(set(old) | set(new))
    return [f"{k}: {old.get(k)!r} -> {new.get(k)!r}" for k in keys
            if _canonical(old.get(k)) != _canonical(new.get(k))
            and k not in _TRACER_IGNORED + _SKY_IGNORED]


def find_reusable(conf, folders, log=print, keys=None):
    """{tracer name: Hit} for the tracers of ``conf`` whose ideal cube an earlier run folder
    (the first that has it) holds with the same key; every other tracer is logged as a miss
    with its reason. ``folders``: earlier run folders (a missing one is a miss); ``keys``:
    {tracer name: (key, parts)} if already computed."""
    hits, memo, indexes = {}, {}, []
    for folder in folders or ():
        if not os.path.isdir(folder):
            log(f"reuse: {folder} does not exist: no ideal cubes to reuse from it")
            continue
        indexes.append((folder, *_index(folder)))
    if not folders:
        return hits
    products = set(conf["output"]["products"])
    for tr in conf["tracer"]:
        key, parts = (keys or {}).get(tr["name"]) or ideal_key(conf, tr, memo)
        reasons = []
        for folder, candidates, summary in indexes:
            match = [p for p, h in candidates if h is not None and h.get(KEY_CARD) == key]
            if not match:
                reasons.append(_why_not(folder, candidates, summary, parts, conf, tr))
                continue
            if summary is None:
                reasons.append(f"{folder} has no readable summary.json")
                continue
            try:
                hits[tr["name"]] = _load(match[0], key, summary, products)
                break
            except _Miss as exc:
                reasons.append(f"{folder}: {exc}")
        if tr["name"] in hits:
            log(f"reuse: {tr['name']}: ideal cube reused from {hits[tr['name']].source}")
        elif indexes:
            log(f"reuse: {tr['name']}: synthesised ({'; '.join(reasons)})")
    return hits


def _why_not(folder, candidates, summary, parts, conf, tr):
    if not candidates:
        return f"{folder} holds no ideal cubes"
    broken = [os.path.basename(p) for p, h in candidates if h is None]
    note = f"; {', '.join(broken)} does not read" if broken else ""
    path, differ = _nearest(candidates, parts)
    if path is None:
        return f"no ideal cube in {folder} records an {KEY_CARD}{note}"
    name = os.path.basename(path)[:-len("_ideal.fits")]
    texts = []
    for p in differ:
        keys = _changed_keys(p, (summary or {}).get("config"), conf, tr, name)
        texts.append(_PART_NAMES[p] + (f" ({', '.join(keys)})" if keys else ""))
    return (f"no ideal cube in {folder} has the same inputs; the nearest, {name}, differs in "
            + "; ".join(texts) + note)
