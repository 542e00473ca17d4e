"""Property-based tests of the input readers: whatever the input, each returns a valid product
or raises a SynthError (one line), never anything else.

Readers: the config loader, the npz / HDF5 / FITS snapshot readers, the Leiden reader and
the antenna CSV reader. Inputs are generated with hypothesis from valid examples by small
corruptions (wrong types, shapes, values, units, lines deleted, tokens replaced) and from
free text. ``derandomize=True`` makes the examples the same on every run (CI is
deterministic) and few examples keep the file fast.
"""

import math
import os
import tempfile
import warnings

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from synth.errors import SynthError, SynthWarning

SETTINGS = settings(derandomize=True, max_examples=40, deadline=None, database=None,
                    suppress_health_check=[HealthCheck.too_slow,
                                           HealthCheck.function_scoped_fixture])


def _outcome(fn, *args, **kw):
    """Call ``fn``; return its product, or None after a one-line SynthError. Any other
    exception fails the test. Synth's own warnings are allowed; any other warning is an
    error (pytest's filterwarnings=error)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SynthWarning)
        try:
            return fn(*args, **kw)
        except SynthError as exc:
            assert "\n" not in str(exc).strip(), str(exc)
            return None


# -- config loader -----------------------------------------------------------------------------

VALID_TOML = """[cloud]
source = "demo"
cells = 10
[sky]
distance_pc = 2000
[channels]
width_kms = 1.0
velocity_min_kms = -8
velocity_max_kms = 8
[[tracer]]
species = "13CO"
transition = "1-0"
abundance = 2e-6
[[setup]]
name = "dish"
kind = "dish"
diameter_m = 30
rms_k = 0.1
"""

_values = st.one_of(
    st.sampled_from([1, 2.0, 0.5, 16, 2000, -1, 0]),
    st.integers(-10**12, 10**12), st.floats(allow_nan=True, allow_infinity=True),
    st.booleans(), st.text(max_size=8), st.lists(st.integers(-3, 3), max_size=3),
    st.just("nan"), st.just("inf"))


def _toml_value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return "nan" if math.isnan(v) else ("inf" if v == math.inf else
                                             "-inf" if v == -math.inf else repr(v))
    if isinstance(v, int):
        return str(v)
    if isinstance(v, list):
        return "[" + ", ".join(str(x) for x in v) + "]"
    return '"' + "".join(c if " " <= c <= "~" and c not in '"\\' else f"\\u{ord(c):04X}"
                         for c in v if ord(c) < 0xD800 or ord(c) > 0xDFFF) + '"'


@SETTINGS
@given(line=st.integers(0, VALID_TOML.count("\n") - 1), value=_values,
       key=st.sampled_from(["", "", "", "size", "distance_pc", "width_kms", "abundance", "species",
                            "dec_deg", "name", "kind", "velocity_min_kms", "junk"]))
def test_config_loader_mutated(tmp_path_factory, line, value, key):
    """A valid config with one line replaced by `key = value` (or with its value replaced)."""
    from synth.config import load_config
    rows = VALID_TOML.splitlines()
    if "=" in rows[line]:
        k = key or rows[line].split("=")[0].strip()
        rows[line] = f"{k} = {_toml_value(value)}"
    else:
        rows[line] = f"{key or 'x'} = {_toml_value(value)}"
    path = tmp_path_factory.mktemp("cfg") / "run.toml"
    path.write_text("\n".join(rows) + "\n")
    conf = _outcome(load_config, str(path))
    if conf is not None:
        assert conf["tracer"] and conf["sky"]["distance_pc"] > 0
        assert all(math.isfinite(v) for v in (conf["sky"]["ra_deg"], conf["sky"]["dec_deg"]))


@SETTINGS
@given(blob=st.binary(max_size=200))
def test_config_loader_any_bytes(tmp_path_factory, blob):
    from synth.config import load_config
    path = tmp_path_factory.mktemp("cfg") / "run.toml"
    path.write_bytes(blob)
    assert _outcome(load_config, str(path)) is None  # never a valid config (no [sky])


# -- snapshot readers --------------------------------------------------------------------------

_UNITS = {"n_h2": "cm-3", "t_kin": "K", "velocity": "km/s", "sigma_turb": "km/s",
          "cell_size": "pc"}
_corruptions = st.sampled_from(["drop", "shape", "dtype", "fill", "unit", "no-unit"])
_dtypes = st.sampled_from(["f4", "i4", "u1", "c8", "U3", "bool", "f2"])
_fills = st.sampled_from([0.0, -1.0, np.nan, np.inf, 1e300])


@st.composite
def snapshot_arrays(draw):
    """A valid snapshot's arrays (n x n x n, units stored) with 0-2 corruptions."""
    n = draw(st.integers(1, 3))
    arrays = {"n_h2": np.full((n, n, n), 100.0), "t_kin": np.full((n, n, n), 10.0),
              "velocity": np.zeros((3, n, n, n)), "sigma_turb": np.full((n, n, n), 0.2),
              "cell_size": np.array(0.1)}
    units = {f"{k}_unit": np.array(v) for k, v in _UNITS.items()}
    for _ in range(draw(st.integers(0, 2))):
        name = draw(st.sampled_from(sorted(arrays)))
        what = draw(_corruptions)
        if name not in arrays:
            continue
        arr = arrays[name]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # casting nan/inf to integers is the point
            if what == "drop":
                del arrays[name]
            elif what == "shape":
                arrays[name] = (np.zeros(2) if arr.ndim == 0 else
                                arr[..., :0] if draw(st.booleans()) else arr[0])
            elif what == "dtype":
                try:
                    arrays[name] = arr.astype(draw(_dtypes))
                except (ValueError, OverflowError):
                    arrays[name] = np.zeros(arr.shape, dtype="u1")
            elif what == "fill":
                arrays[name] = np.full(arr.shape, draw(_fills))
            elif what == "unit":
                units[f"{name}_unit"] = np.array(draw(st.sampled_from(
                    ["m", "g/cm3", "banana", "", "K", "deg", "cm-3"])))
            else:
                units.pop(f"{name}_unit", None)
    return arrays, units


def _read(path, fmt):
    from synth.snapshot.readers import read_snapshot
    snap = _outcome(read_snapshot, path, format=fmt)
    if snap is not None:
        assert len(snap.shape) == 3 and min(snap.shape) >= 1
        assert np.all(np.isfinite(snap.n_h2_cm3)) and np.all(snap.n_h2_cm3 >= 0)
        assert np.all(snap.t_kin_k > 0)
    return snap


@SETTINGS
@given(data=snapshot_arrays())
def test_npz_reader(tmp_path_factory, data):
    arrays, units = data
    path = str(tmp_path_factory.mktemp("npz") / "s.npz")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the writer's own casts are not under test
        np.savez(path, **arrays, **units)
    _read(path, "npz")


@SETTINGS
@given(data=snapshot_arrays())
def test_hdf5_reader(tmp_path_factory, data):
    import h5py
    arrays, units = data
    path = str(tmp_path_factory.mktemp("h5") / "s.h5")
    with h5py.File(path, "w") as f:
        for name, arr in arrays.items():
            if arr.dtype.kind == "U":
                arr = arr.astype("S")
            if name == "cell_size":
                f.attrs["cell_size"] = arr
                continue
            ds = f.create_dataset(name, data=arr)
            if f"{name}_unit" in units:
                ds.attrs["units"] = str(units[f"{name}_unit"])
    _read(path, "hdf5")


@SETTINGS
@given(data=snapshot_arrays(), cdelt=st.sampled_from([0.1, 0.0, -1.0, 1e300]),
       cunit=st.sampled_from(["pc", "cm", "deg", "banana"]))
def test_fits_reader(tmp_path_factory, data, cdelt, cunit):
    from astropy.io import fits
    arrays, units = data
    path = str(tmp_path_factory.mktemp("fits") / "s.fits")
    hdus = [fits.PrimaryHDU()]
    for name, arr in arrays.items():
        if name == "cell_size" or arr.dtype.kind in "UcbO" or arr.dtype == np.float16:
            continue
        hdu = fits.ImageHDU(np.ascontiguousarray(arr.T), name=name.upper())
        if f"{name}_unit" in units:
            hdu.header["BUNIT"] = str(units[f"{name}_unit"])
        hdu.header["CDELT1"] = cdelt
        hdu.header["CUNIT1"] = cunit
        hdus.append(hdu)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # astropy's own header warnings on writing
        fits.HDUList(hdus).writeto(path)
    _read(path, "fits")


# -- Leiden reader -----------------------------------------------------------------------------

LEIDEN = """!MOLECULE
XY
!MOLECULAR WEIGHT
28.0
!NUMBER OF ENERGY LEVELS
3
!LEVEL + ENERGIES(cm^-1) + WEIGHT + J
1 0.0 1.0 0
2 3.845 3.0 1
3 11.535 5.0 2
!NUMBER OF RADIATIVE TRANSITIONS
2
!TRANS + UP + LOW + EINSTEINA(s^-1) + FREQ(GHz) + E_u(K)
1 2 1 7.2e-08 115.2712 5.53
2 3 2 6.9e-07 230.5380 16.60
!NUMBER OF COLL PARTNERS
1
!COLLISIONS BETWEEN
1 CO-H2
!NUMBER OF COLL TRANS
3
!NUMBER OF COLL TEMPS
2
!COLL TEMPS
10.0 20.0
!TRANS + UP + LOW + COLLRATES(cm^3 s^-1)
1 2 1 3.3e-11 3.3e-11
2 3 1 2.0e-11 2.1e-11
3 3 2 6.0e-11 6.1e-11
"""

_tokens = st.sampled_from(["0", "-1", "99", "nan", "inf", "1e400", "x", "", "3.5", "!", "1 2"])


@SETTINGS
@given(line=st.integers(0, LEIDEN.count("\n") - 1), op=st.sampled_from(["drop", "token", "dup"]),
       word=st.integers(0, 5), token=_tokens)
def test_leiden_reader(tmp_path_factory, line, op, word, token):
    """The reader on a valid file with one line dropped, duplicated, or one token replaced."""
    from synth.molecules.leiden import read_leiden
    rows = LEIDEN.splitlines()
    if op == "drop":
        del rows[line]
    elif op == "dup":
        rows.insert(line, rows[line])
    else:
        parts = rows[line].split()
        if parts:
            parts[word % len(parts)] = token
        rows[line] = " ".join(parts)
    path = tmp_path_factory.mktemp("mol") / "xy.dat"
    path.write_text("\n".join(rows) + "\n")
    mol = _outcome(read_leiden, str(path))
    if mol is not None:
        assert len(mol.energy_k) >= 1 and np.all(np.isfinite(mol.energy_k))


@SETTINGS
@given(text=st.text(max_size=300))
def test_leiden_reader_free_text(tmp_path_factory, text):
    from synth.molecules.leiden import read_leiden
    path = tmp_path_factory.mktemp("mol") / "t.dat"
    path.write_text(text, encoding="utf-8", errors="surrogatepass")
    _outcome(read_leiden, str(path))


# -- antenna CSV reader ------------------------------------------------------------------------

_bad_cells = st.one_of(st.sampled_from(["nan", "inf", "", "x", "1e400", "a1", '"q,uoted"',
                                        "=1+1", "0", "-3", "1,2"]),
                       st.floats(allow_nan=True, allow_infinity=True).map(repr))


@st.composite
def layout_rows(draw):
    """Rows of a valid layout (distinct names and positions) with some cells replaced."""
    n = draw(st.integers(0, 5))
    rows = [[f"a{i}", f"{10.0 * i}", f"{draw(st.integers(-50, 50))}", "0", "12"]
            for i in range(n)]
    for _ in range(draw(st.integers(0, 2))):
        if rows:
            r = draw(st.integers(0, n - 1))
            c = draw(st.integers(0, 5))
            cell = draw(_bad_cells)
            if c < 5:
                rows[r][c] = cell
            else:
                rows[r].append(cell)
    return rows


@SETTINGS
@given(rows=layout_rows(), header=st.booleans())
def test_antenna_csv_reader(tmp_path_factory, rows, header):
    from synth.instrument.arrays import LAYOUT_COLUMNS, read_layout_csv
    lines = ([",".join(LAYOUT_COLUMNS)] if header else []) + [",".join(r) for r in rows]
    path = tmp_path_factory.mktemp("ant") / "a.csv"
    path.write_text("\n".join(lines) + "\n")
    lay = _outcome(read_layout_csv, str(path))
    if lay is not None:
        assert lay.enu_m.shape[1] == 3 and lay.enu_m.shape[0] >= 2
        assert np.all(np.isfinite(lay.enu_m))


def test_properties_are_deterministic():
    """The settings above make CI deterministic (same examples every run)."""
    assert SETTINGS.derandomize and SETTINGS.database is None
    assert tempfile.gettempdir() and os.sep
