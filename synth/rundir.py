"""Run folders: the marker file, safe names, paths kept inside the run, overwrite rules and
the cleanup of half-built folders.

A run folder is built under a hidden name beside its destination
(``.NAME.partial-HOST-PID-XXXX``) and renamed into place when the run succeeds. Its marker file,
:data:`MARKER`, names synth, its version and the files it wrote. ``--overwrite`` replaces a
folder only when it carries that marker, holds none of the run's inputs and is neither the
working folder nor one of its parents; anything else is refused before any work. Half-built
folders and temporary snapshot files of a run are removed when the process exits (also on
Ctrl-C and SIGTERM); those left by a killed process (SIGKILL, power loss) are found and removed
by the next run into the same parent folder.
"""

import atexit
import json
import os
import re
import secrets
import shutil
import stat
import tempfile

from .errors import ConfigError, OutputError

__all__ = ["MARKER", "SAFE_NAME_RULE", "check_name", "run_path", "check_overwrite",
           "make_partial", "finish_output", "write_marker", "read_marker", "sweep_debris",
           "temp_folder", "register_cleanup", "unregister_cleanup", "cleanup_registered",
           "remove_temp_folder", "csv_cell", "host_tag"]

#: The marker file every run folder carries (JSON: written_by, version, files).
MARKER = "synth-run.json"

#: Allowed characters of tracer and setup names, said in words for error messages.
SAFE_NAME_RULE = ("ASCII letters, digits and _ - . + (at most 64 characters, "
                  "not starting with . or - or +)")
_SAFE_FIRST = re.compile(r"[A-Za-z0-9_]")
_SAFE_REST = re.compile(r"[A-Za-z0-9_.+-]")
_DEBRIS = re.compile(r"^\..+\.(?:partial|old)-([0-9a-f]{6})-(\d+)-[0-9a-f]+$")
_SPILL_PREFIX = "synth-tmp-"
_SPILL = re.compile(r"^synth-tmp-([0-9a-f]{6})-(\d+)-[0-9a-f]+$")


def check_name(name, where):
    """Raise ConfigError unless ``name`` is a plain label (see :data:`SAFE_NAME_RULE`).

    Names become parts of file names, so they must not hold path separators, ``..``,
    control or non-ASCII characters. ``where`` says which key this is, e.g.
    ``[[tracer]] #2.name``.
    """
    if not isinstance(name, str) or not name:
        raise ConfigError(f"{where} must be a non-empty name of {SAFE_NAME_RULE}")
    for i, ch in enumerate(name):
        ok = (_SAFE_FIRST if i == 0 else _SAFE_REST).fullmatch(ch)
        if not ok:
            shown = repr(ch) if ch.isprintable() and ch.isascii() else f"U+{ord(ch):04X}"
            pos = "first " if i == 0 else ""
            raise ConfigError(f"{where} = {_show(name)} has the {pos}character {shown}; "
                              f"names may hold only {SAFE_NAME_RULE}")
    if len(name) > 64:
        raise ConfigError(f"{where} is {len(name)} characters long; names may hold only "
                          f"{SAFE_NAME_RULE}")
    return name


def _show(text, limit=40):
    """A printable, one-line, shortened rendering of user text for messages."""
    s = text.encode("ascii", "backslashreplace").decode("ascii")
    s = "".join(c if c.isprintable() else repr(c)[1:-1] for c in s)
    return "'" + (s if len(s) <= limit else s[:limit] + "...") + "'"


def run_path(run_dir, name):
    """``run_dir/name``, after checking that it stays inside ``run_dir`` (OutputError if not).

    Every file of a run is written through this check, so no label can place a file outside
    the run folder."""
    root = os.path.realpath(run_dir)
    path = os.path.realpath(os.path.join(root, name))
    if os.path.dirname(path) != root or os.path.basename(path) in ("", ".", ".."):
        raise OutputError(f"refusing to write {_show(str(name))}: it is not a plain file "
                          f"name inside the run folder")
    return os.path.join(run_dir, os.path.basename(path))


def csv_cell(value):
    """A CSV cell that a spreadsheet will not run as a formula: text starting with
    ``= + - @`` (or a tab / carriage return) gets a leading single quote. Numbers are kept."""
    if isinstance(value, str) and value[:1] in ("=", "+", "-", "@", "\t", "\r"):
        return "'" + value
    return value


def _inside(path, folder):
    path, folder = os.path.realpath(path), os.path.realpath(folder)
    return path == folder or path.startswith(folder.rstrip(os.sep) + os.sep)


def _cwd():
    try:
        return os.getcwd()
    except OSError:  # the working folder was removed: nothing can be inside it
        return None


def read_marker(folder):
    """The parsed marker of a run folder, or None if it has none (or an unreadable one)."""
    try:
        with open(os.path.join(folder, MARKER), encoding="utf-8") as fh:
            data = json.load(fh)
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) and data.get("written_by") == "synth" else None


def check_overwrite(out_dir, overwrite, inputs=(), flag="--overwrite"):
    """Refuse, in one line, an output folder that must not be created or replaced.

    Without ``overwrite`` an existing path is refused. With it, only a synth run folder
    (with :data:`MARKER`) that holds none of ``inputs`` and is neither the working folder
    nor a parent of it may be replaced. Returns the absolute path."""
    out_dir = os.path.abspath(out_dir)
    if not os.path.lexists(out_dir):
        return out_dir
    if not overwrite:
        raise OutputError(f"output folder {out_dir} exists; choose another --out or pass "
                          f"{flag}")
    why = None
    if os.path.islink(out_dir):
        why = "it is a symbolic link, not a run folder"
    elif not os.path.isdir(out_dir):
        why = "it is a file, not a run folder"
    elif _cwd() is not None and _inside(_cwd(), out_dir):
        why = "it is the working folder or one of its parents"
    elif read_marker(out_dir) is None:
        why = f"it has no {MARKER}, so it was not written by synth"
    else:
        for path in inputs:
            if path and _inside(path, out_dir):
                why = f"it holds {path}, an input of this run"
                break
    if why:
        raise OutputError(f"{flag} refuses to replace {out_dir}: {why}; choose another --out")
    return out_dir


# -- half-built folders and temporary files ------------------------------------------------

_REGISTERED = []


def register_cleanup(path):
    """Remove ``path`` (a folder) when the process exits, unless unregistered first."""
    _REGISTERED.append(path)


def unregister_cleanup(path):
    if path in _REGISTERED:
        _REGISTERED.remove(path)


@atexit.register
def cleanup_registered():
    """Remove every registered folder (runs at exit; also called by the signal handlers)."""
    while _REGISTERED:
        shutil.rmtree(_REGISTERED.pop(), ignore_errors=True)


def host_tag():
    """Six hex digits naming this machine, so that a sweep never judges a process of another
    machine (a shared file system) by a process id of this one."""
    import hashlib
    import socket
    return hashlib.sha256(socket.gethostname().encode()).hexdigest()[:6]


def _token():
    return f"{host_tag()}-{os.getpid()}-{secrets.token_hex(4)}"


def _mkdir_umask(path):
    """Create a folder with the user's umask (tempfile.mkdtemp would force mode 0700)."""
    os.mkdir(path, 0o777)
    return path


def make_partial(out_dir):
    """Create and register the hidden folder a run into ``out_dir`` is built in."""
    out_dir = os.path.abspath(out_dir)
    parent = os.path.dirname(out_dir)
    if not os.path.isdir(parent):
        raise OutputError(f"cannot create {out_dir}: the folder {parent} does not exist")
    if not os.access(parent, os.W_OK):
        raise OutputError(f"cannot create {out_dir}: the folder {parent} is not writable")
    path = os.path.join(parent, f".{os.path.basename(out_dir)}.partial-{_token()}")
    try:
        _mkdir_umask(path)
    except OSError as exc:
        raise OutputError(f"cannot create {out_dir}: {exc.strerror or exc} in {parent}; "
                          "choose a writable folder with --out") from None
    register_cleanup(path)
    return path


def write_marker(folder, kind="run"):
    """Write :data:`MARKER` into ``folder``, listing the files already in it."""
    from . import __version__
    from .fitsio import write_json
    files = sorted(f for f in os.listdir(folder) if f != MARKER and not f.startswith("."))
    write_json({"written_by": "synth", "version": __version__, "kind": kind, "files": files},
               os.path.join(folder, MARKER))


def finish_output(tmp, out_dir, kind="run"):
    """Write the marker into the built folder ``tmp`` and rename it to ``out_dir``, replacing
    an existing folder (already checked by :func:`check_overwrite`) only now."""
    write_marker(tmp, kind)
    out_dir = os.path.abspath(out_dir)
    if os.path.lexists(out_dir):
        old = os.path.join(os.path.dirname(out_dir),
                           f".{os.path.basename(out_dir)}.old-{_token()}")
        _mkdir_umask(old)
        register_cleanup(old)
        os.replace(out_dir, os.path.join(old, "run"))
        os.replace(tmp, out_dir)
        shutil.rmtree(old, ignore_errors=True)
        unregister_cleanup(old)
    else:
        os.replace(tmp, out_dir)
    unregister_cleanup(tmp)


def _alive(pid):
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # exists but not ours
        return True
    return True


def sweep_debris(parent, log=None):
    """Remove half-built run folders in ``parent`` (and temporary snapshot files in the
    temporary folder) left by synth processes that no longer run; return their paths.

    Only names synth makes are touched: ``.NAME.partial-HOST-PID-XXXX``,
    ``.NAME.old-HOST-PID-XXXX`` and ``synth-tmp-HOST-PID-XXXX``, and only when they belong to
    this user, were made on this machine (HOST) and process PID is gone."""
    removed = []
    host, uid = host_tag(), os.getuid()
    for folder, pattern in ((parent, _DEBRIS), (tempfile.gettempdir(), _SPILL)):
        try:
            names = os.listdir(folder)
        except OSError:
            continue
        for name in names:
            m = pattern.match(name)
            path = os.path.join(folder, name)
            if m is None or m.group(1) != host or _alive(int(m.group(2))):
                continue
            try:
                st = os.lstat(path)
            except OSError:
                continue
            if not stat.S_ISDIR(st.st_mode) or st.st_uid != uid:
                continue
            shutil.rmtree(path, ignore_errors=True)
            if not os.path.exists(path):
                removed.append(path)
    if removed and log is not None:
        log(f"removed {len(removed)} folder(s) left by an interrupted synth run: "
            + ", ".join(os.path.basename(p) for p in removed))
    return removed


def temp_folder():
    """A registered temporary folder for files of this run outside the run folder (e.g. a
    snapshot spilled for dask workers); remove it with :func:`remove_temp_folder`."""
    path = os.path.join(tempfile.gettempdir(), f"{_SPILL_PREFIX}{_token()}")
    _mkdir_umask(path)
    register_cleanup(path)
    return path


def remove_temp_folder(path):
    shutil.rmtree(path, ignore_errors=True)
    unregister_cleanup(path)
