"""Plans kept on disk, so that separate processes (a sweep's worker pool, Ray actors) share one plan
per world and planning options instead of each planning it again.

An entry is one file ``<store>/<key digest>.plan``: a header line (JSON: format, the entry's key,
the payload's length and SHA-256) and the pickled :class:`~shortcut_gym.agents.planner.search.Plan`
(each MDP's transition array by its nonzero entries, about a tenth of its dense size).
The key digest covers the in-process cache key (the world's content digest and the options,
:func:`shortcut_gym.agents.planner.cache.plan_key`), the planner's and the world's source code and
the Python and numpy versions, so a plan made by other code is never read back as this code's.

* Writes are atomic: the entry is written to a temporary file of a unique name in the store
  (process id and a random suffix) and renamed over the entry's name.
* Loads are verified: the header, the length, the SHA-256 of the payload, the key, and the
  unpickled object's type. An entry that fails any check raises :class:`DamagedPlanEntry`; the
  caller sets it aside (renamed ``*.damaged-<random>``) and plans again (never a wrong plan).
* One process plans a key at a time: an exclusive ``fcntl.flock`` on ``<key digest>.lock`` is held
  while an entry is looked up, made and written, so processes wanting the same plan wait for
  one plan. (Advisory; where ``fcntl`` is missing two processes may both plan, still correctly.)
  The holder removes the lock file before letting go (:func:`key_lock`), so a store holds its
  entries and no lock files once no process is using it.

* Size cap (optional, per process: :func:`set_plan_store`'s ``max_bytes``): the cap is on every
  file the store makes (:func:`store_files`: entries, their lock files, temporary files of a
  write, and damaged entries set aside), not on the entries alone. After writing an entry the
  process prunes (:func:`prune`): it removes the lock files and temporaries nobody holds any more
  (left by a process that died, or by entries gone), then, while the store's files total more than
  the cap, the damaged entries set aside (oldest first) and the least recently used entries
  (oldest modification time first; a load marks its entry used), each with its lock file; never
  the entry just written and never one whose lock another process holds. A removed entry is
  planned again when next wanted, with the same result. A lock file is removed only while held,
  and a process taking a lock checks that the file it locked is still the one under that name
  (:func:`key_lock`), so removing lock files never lets two processes hold one key.

The store is this user's own cache: entries are pickles, so load only stores you wrote.
The store in use is set per process (:func:`set_plan_store`, :func:`using_plan_store`) or by the
environment variable ``SHORTCUT_GYM_PLAN_STORE``; a sweep puts its own under ``<folder>/plans``
and removes it when it finishes (unless asked to keep it).
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import logging
import os
import pickle
import sys
import uuid
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np

from shortcut_gym.agents.planner.mdp import CommandMDP
from shortcut_gym.agents.planner.search import Plan
from shortcut_gym.envs.errors import ConfigError, ShortcutGymError

try:
    import fcntl
except ImportError:  # pragma: no cover - not POSIX
    fcntl = None  # type: ignore[assignment]

log = logging.getLogger(__name__)

#: Environment variable naming a plan store folder for every process that does not set one.
STORE_ENV = "SHORTCUT_GYM_PLAN_STORE"
#: First bytes of an entry's header.
FORMAT = "shortcut-gym plan entry 2"

_store: dict[str, Any] = {"dir": None, "max_bytes": None}
_code: dict[str, str] = {}


class DamagedPlanEntry(ShortcutGymError, ValueError):
    """A plan store entry fails a check (header, length, checksum, key or type); the message says which."""


def set_plan_store(folder: str | Path | None, max_bytes: int | None = None) -> Path | None:
    """Use ``folder`` as this process's plan store (None: the environment's, else none), its
    entries capped at ``max_bytes`` bytes (None: no cap; see :func:`prune`); returns the previous folder."""
    if max_bytes is not None and (isinstance(max_bytes, bool) or not isinstance(max_bytes, int) or max_bytes < 1):
        raise ConfigError(f"plan store cap max_bytes must be a whole number of bytes >= 1, got {max_bytes!r}")
    previous = _store["dir"]
    _store["dir"] = None if folder is None else Path(folder)
    _store["max_bytes"] = max_bytes
    return previous


def store_cap() -> int | None:
    """The byte cap on this process's plan store entries (None: none)."""
    return _store["max_bytes"]


def plan_store() -> Path | None:
    """The plan store folder in use in this process (or None: plans are kept in memory only)."""
    if _store["dir"] is not None:
        return _store["dir"]
    env = os.environ.get(STORE_ENV)
    return Path(env) if env else None


@contextlib.contextmanager
def using_plan_store(folder: str | Path | None, max_bytes: int | None = None) -> Iterator[Path | None]:
    """Use ``folder`` as the plan store inside the block, capped at ``max_bytes`` (None: leave the
    setting as it is)."""
    if folder is None:
        yield plan_store()
        return
    previous, previous_cap = _store["dir"], _store["max_bytes"]
    set_plan_store(folder, max_bytes)
    try:
        yield Path(folder)
    finally:
        set_plan_store(previous, previous_cap)


def code_digest() -> str:
    """SHA-256 (hex) of the planner's and the world's source files and the Python and numpy versions."""
    if "digest" not in _code:
        import shortcut_gym.envs

        h = hashlib.sha256(f"{sys.version_info[:2]} numpy {np.__version__}".encode())
        for folder in (Path(__file__).parent, Path(shortcut_gym.envs.__file__).parent):
            for f in sorted(folder.glob("*.py")):
                h.update(f.name.encode())
                h.update(f.read_bytes())
        _code["digest"] = h.hexdigest()
    return _code["digest"]


def entry_name(key: tuple) -> str:
    """The file stem of a key's entry: SHA-256 of the key and the code digest."""
    return hashlib.sha256(f"{key!r}|{code_digest()}".encode()).hexdigest()


def _folder(store: Path) -> Path:
    try:
        store.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise ConfigError(f"plan store {store}: cannot create the folder: {err}") from None
    if not os.access(store, os.W_OK):
        raise ConfigError(f"plan store {store}: the folder is not writable")
    return store


def _take_lock(path: Path, wait: bool) -> io.BufferedRandom | None:
    """The open, exclusively locked lock file ``path`` (created when missing); None when another
    process holds it and ``wait`` is False. A lock file removed or replaced while this process
    waited for it (by :func:`prune`) is opened again, so the lock held is always the one under
    ``path``."""
    while True:
        fh = open(path, "a+b")  # noqa: SIM115 - returned open, closed by _drop_lock
        if fcntl is None:
            return fh
        try:
            fcntl.flock(fh.fileno(), fcntl.LOCK_EX | (0 if wait else fcntl.LOCK_NB))
        except BlockingIOError:
            fh.close()
            return None
        try:
            now = os.stat(path)
        except FileNotFoundError:
            now = None
        held = os.fstat(fh.fileno())
        if now is not None and (now.st_ino, now.st_dev) == (held.st_ino, held.st_dev):
            return fh
        fh.close()  # removed while we waited: lock the file now under that name


def _drop_lock(fh: io.BufferedRandom) -> None:
    if fcntl is not None:
        fcntl.flock(fh.fileno(), fcntl.LOCK_UN)
    fh.close()


@contextlib.contextmanager
def key_lock(store: Path, key: tuple) -> Iterator[None]:
    """Hold the exclusive lock of ``key``'s entry (other processes wanting it wait)."""
    path = _folder(store) / f"{entry_name(key)}.lock"
    fh = _take_lock(path, wait=True)
    assert fh is not None  # waiting never gives up
    try:
        yield
    finally:
        _remove_held(path, fh)
        _drop_lock(fh)


def _remove_held(path: Path, fh: io.BufferedRandom) -> None:
    """Remove the lock file ``path`` that ``fh`` holds locked, so a store keeps no lock file once its
    holder lets go. Safe while others wait on it: a waiter that then locks the removed file finds
    it is no longer the one under ``path`` (:func:`_take_lock`) and locks the file now there, so
    the lock stays exclusive. Left in place where locks are not enforced (no ``fcntl``)."""
    if fcntl is None:
        return
    with contextlib.suppress(OSError):
        now, held = os.stat(path), os.fstat(fh.fileno())
        if (now.st_ino, now.st_dev) == (held.st_ino, held.st_dev):
            path.unlink()


def entry_path(store: Path, key: tuple) -> Path:
    """Where ``key``'s entry lives in ``store``."""
    return store / f"{entry_name(key)}.plan"


def _dense_P(shape: tuple[int, int, int], rows: np.ndarray, cols: np.ndarray, data: np.ndarray) -> np.ndarray:
    """The dense transition array (actions x S x S) of its nonzero entries (row = action * S + state)."""
    P = np.zeros(shape, dtype=np.float64)
    P.reshape(shape[0] * shape[1], shape[2])[rows, cols] = data
    return P


def _command_mdp(fields: dict, shape: tuple[int, int, int], rows: np.ndarray, cols: np.ndarray,
                 data: np.ndarray) -> CommandMDP:
    """A :class:`CommandMDP` from its stored fields and the nonzeros of P (see :class:`_EntryPickler`)."""
    mdp = CommandMDP.__new__(CommandMDP)
    mdp.__dict__.update(fields)
    mdp.P = _dense_P(shape, rows, cols, data)
    return mdp


class _EntryPickler(pickle.Pickler):
    """Pickles each MDP's transition array P by its nonzero entries (about a tenth of the dense
    array; rebuilt exactly on load: every zero of P is +0.0, checked here) and leaves out the caches
    derived from P (``_csr``, ``_constants``), which are rebuilt when first needed."""

    def reducer_override(self, obj: object) -> Any:  # noqa: ANN401 - NotImplemented or a reduce tuple
        if type(obj) is not CommandMDP:
            return NotImplemented
        P = np.asarray(obj.P, dtype=np.float64)
        if P.ndim != 3 or np.signbit(P[P == 0.0]).any():
            return NotImplemented  # -0.0 would come back as +0.0: keep the dense array
        flat = P.reshape(P.shape[0] * P.shape[1], P.shape[2])
        rows, cols = np.nonzero(flat)
        fields = {k: v for k, v in vars(obj).items() if k not in ("P", "_csr", "_constants")}
        return _command_mdp, (fields, P.shape, rows.astype(np.int32), cols.astype(np.int32), flat[rows, cols])


def encode(key: tuple, plan: Plan) -> bytes:
    """An entry's bytes: header line and pickled plan (MDP transitions stored by their nonzeros)."""
    buffer = io.BytesIO()
    _EntryPickler(buffer, protocol=pickle.HIGHEST_PROTOCOL).dump(plan)
    payload = buffer.getvalue()
    header = {"format": FORMAT, "key": repr(key), "code": code_digest(), "bytes": len(payload),
              "sha256": hashlib.sha256(payload).hexdigest()}
    return json.dumps(header, sort_keys=True).encode() + b"\n" + payload


def decode(data: bytes, key: tuple, where: str = "<entry>") -> Plan:
    """The plan of an entry's bytes, after every check; :class:`DamagedPlanEntry` naming the failed one."""
    line, sep, payload = data.partition(b"\n")
    try:
        header = json.loads(line) if sep else None
    except ValueError:
        header = None
    if not isinstance(header, dict) or header.get("format") != FORMAT:
        raise DamagedPlanEntry(f"{where}: no plan entry header")
    if header.get("key") != repr(key) or header.get("code") != code_digest():
        raise DamagedPlanEntry(f"{where}: the entry holds another key or code version")
    if header.get("bytes") != len(payload):
        raise DamagedPlanEntry(f"{where}: {len(payload)} payload bytes, the header says {header.get('bytes')}")
    if hashlib.sha256(payload).hexdigest() != header.get("sha256"):
        raise DamagedPlanEntry(f"{where}: the payload's SHA-256 differs from the header's")
    try:
        plan = pickle.loads(payload)
    except Exception as err:  # noqa: BLE001 - any unpickling fault is a damaged entry
        raise DamagedPlanEntry(f"{where}: the payload does not unpickle: {type(err).__name__}: {err}") from None
    if not isinstance(plan, Plan):
        raise DamagedPlanEntry(f"{where}: the payload is a {type(plan).__name__}, not a Plan")
    return plan


def load(store: Path, key: tuple) -> Plan | None:
    """``key``'s plan from ``store`` (None when absent). A damaged entry is set aside (renamed
    ``*.damaged-<random>``, a warning logged) and None returned, so the caller plans again."""
    path = entry_path(store, key)
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        return None
    try:
        plan = decode(data, key, str(path))
    except DamagedPlanEntry as err:
        aside = path.with_name(f"{path.name}.damaged-{uuid.uuid4().hex[:8]}")
        with contextlib.suppress(OSError):
            os.replace(path, aside)
        log.warning("%s; set aside as %s, planning again", err, aside.name)
        return None
    with contextlib.suppress(OSError):
        os.utime(path)  # marks the entry used, for the size cap's least-recently-used order
    return plan


def save(store: Path, key: tuple, plan: Plan) -> Path:
    """Write ``key``'s entry atomically (a uniquely named temporary file renamed over it). Call it
    holding :func:`key_lock` where capped processes share the store: :func:`prune` takes a
    temporary whose key's lock is free for one a dead process left."""
    path = entry_path(_folder(store), key)
    tmp = path.with_name(f".{path.name}.{os.getpid()}-{uuid.uuid4().hex}.tmp")
    try:
        with open(tmp, "wb") as fh:
            fh.write(encode(key, plan))
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    finally:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
    return path


def entries(store: Path) -> list[Path]:
    """The store's entry files (none when the folder is missing)."""
    return sorted(Path(store).glob("*.plan")) if Path(store).is_dir() else []


#: The kinds of file a store makes, as :func:`store_files` names them.
FILE_KINDS = ("entry", "lock", "temporary", "set aside")


def file_kind(name: str) -> str | None:
    """Which kind of store file a file name is (:data:`FILE_KINDS`), or None for a file that is
    not the store's (never counted, never removed): the store's names start with an entry stem,
    64 lowercase hex digits."""
    temporary = name.startswith(".") and name.endswith(".tmp")
    stem, dot, rest = name[1 if temporary else 0:].partition(".")
    if not dot or len(stem) != 64 or stem.strip("0123456789abcdef"):
        return None
    if temporary:
        return "temporary" if rest.startswith("plan.") else None  # .<stem>.plan.<pid>-<random>.tmp
    if rest == "plan":
        return "entry"
    if rest == "lock":
        return "lock"
    return "set aside" if rest.startswith("plan.damaged-") else None


def _stem(path: Path) -> str:
    """The entry stem (key digest) a store file belongs to."""
    name = path.name.lstrip(".")
    return name.split(".", 1)[0]


def store_files(store: Path) -> list[tuple[str, Path, int, int]]:
    """Every file the store made, as (kind, path, bytes, modification time in ns), sorted by path;
    files gone while listed are left out."""
    if not Path(store).is_dir():
        return []
    out = []
    for path in sorted(Path(store).iterdir()):
        kind = file_kind(path.name)
        if kind is None:
            continue
        with contextlib.suppress(FileNotFoundError):
            st = path.stat()
            if not path.is_dir():
                out.append((kind, path, st.st_size, st.st_mtime_ns))
    return out


def store_bytes(store: Path) -> int:
    """Bytes of every file the store made (entries, locks, temporaries and damaged entries set
    aside; what the cap of :func:`prune` bounds)."""
    return sum(size for _, _, size, _ in store_files(store))


def _unlink(path: Path, removed: list[Path]) -> bool:
    try:
        path.unlink()
    except FileNotFoundError:
        return False
    removed.append(path)
    return True


def prune(store: Path, max_bytes: int, keep: Path | None = None) -> list[Path]:
    """Bring the store's files (:func:`store_files`) to at most ``max_bytes`` in all.

    First, always: lock files of entries that are gone and temporaries of writes no process makes
    now (their key's lock is free: the writer died), each removed while holding its key's lock.
    Then, while over the cap: damaged entries set aside, oldest first; then entries, least recently
    used (oldest modification time) first, each with its lock file, skipping ``keep`` and entries
    whose lock another process holds (being made or read). Returns every file removed, in order.
    The cap may stay exceeded by what is left (``keep`` and entries in use)."""
    files = store_files(store)
    total = sum(size for *_, size, _ in files)
    sizes = {path: size for _, path, size, _ in files}
    removed: list[Path] = []
    store = Path(store)

    def under_lock(lock: Path, targets: list[Path], drop_lock: bool) -> bool:
        """Remove ``targets`` (and ``lock`` when ``drop_lock``) holding ``lock``; False when it is held."""
        nonlocal total
        if fcntl is None and any(file_kind(t.name) == "temporary" for t in targets):
            return False  # without locks a live writer cannot be told from a dead one
        made_here = not lock.exists()  # a lock file this call makes is not left behind
        fh = _take_lock(lock, wait=False)
        if fh is None:
            return False
        try:
            for target in targets:
                if _unlink(target, removed):
                    total -= sizes.get(target, 0)
            if made_here or (drop_lock and not (store / f"{_stem(lock)}.plan").exists()):
                if _unlink(lock, removed if not made_here else []):
                    total -= sizes.get(lock, 0)
        finally:
            _drop_lock(fh)
        return True

    live = {_stem(path) for kind, path, *_ in files if kind == "entry"}
    for kind, path, _, _ in files:
        if kind == "lock" and _stem(path) not in live:
            under_lock(path, [], drop_lock=True)
        elif kind == "temporary":
            under_lock(store / f"{_stem(path)}.lock", [path], drop_lock=_stem(path) not in live)
    for _, _, path in sorted((mtime, path.name, path) for kind, path, _, mtime in files if kind == "set aside"):
        if total <= max_bytes:
            break
        if _unlink(path, removed):
            total -= sizes[path]
    for _, _, path in sorted((mtime, path.name, path) for kind, path, _, mtime in files if kind == "entry"):
        if total <= max_bytes:
            break
        if keep is not None and path == keep:
            continue
        under_lock(path.with_suffix(".lock"), [path], drop_lock=True)
    return removed
