"""Finding batch folders under raw/ and the files they name, never silently skipping one.

* Paths are made absolute the same way whether given relative, with ``..`` or absolute
  (:func:`absolute`), so every batch gets the same name (its folder relative to the raw root,
  the folder of fluids.toml) however the command was typed.
* :func:`discover_batches` walks the raw folder without following symbolic links; a folder
  holding an entry named ``batch.toml`` is a batch even when that entry is a directory, a
  FIFO or a device (the ingest then refuses it, naming it, without opening it for a read
  that could block), and a symbolically linked folder holding a ``batch.toml`` is listed so
  that the ingest reports it instead of passing over it.
* :func:`batch_problem` says why a listed folder cannot be read as a batch;
  :func:`table_file` resolves a table file, refusing one that leaves its batch folder.
"""

from __future__ import annotations

import hashlib
import os
import re
from pathlib import Path

from pipeline.errors import BatchError, FluidLedgerError

MANIFEST = "batch.toml"
_PLAIN_NAME = re.compile(r"[A-Za-z0-9_][A-Za-z0-9_.-]*")


def absolute(path: Path) -> Path:
    """``path`` absolute, ``..`` removed and the folders above it resolved; its last part is
    kept as written (a symbolic link stays a link, to be reported as one)."""
    full = Path(os.path.abspath(path))
    return full.parent.resolve() / full.name if full.name else full.resolve()


def discover_batches(root: Path) -> list[Path]:
    """Batch folders under ``root`` (``root`` itself when it holds batch.toml), sorted."""
    if os.path.lexists(root / MANIFEST):
        return [root]
    found = []
    for folder, dirs, files in os.walk(root, followlinks=False):
        here = Path(folder)
        if MANIFEST in files or MANIFEST in dirs:
            found.append(here)
        for name in dirs:
            if name != MANIFEST and (here / name).is_symlink() and _holds_batches(here / name):
                found.append(here / name)
        dirs[:] = [d for d in dirs if d != MANIFEST]
    return sorted(found)


def _holds_batches(link: Path) -> bool:
    """A linked folder holds a batch.toml, at any depth (it is then listed, to be reported)."""
    try:
        return any(MANIFEST in files or MANIFEST in dirs
                   for _, dirs, files in os.walk(link, followlinks=False))
    except OSError:
        return False


def real_folder(batch_dir: Path) -> Path:
    """``batch_dir`` with the folders above it resolved (a raw folder reached through a link
    names its batches like the real one); the batch folder itself stays as found."""
    return batch_dir.parent.resolve() / batch_dir.name


def batch_problem(root: Path, batch_dir: Path) -> str | None:
    """Why ``batch_dir`` cannot be read as a batch of the raw folder ``root``, or None."""
    if not batch_dir.is_relative_to(root):
        return (f"the batch folder is not inside the raw folder {root} (the folder of "
                "fluids.toml); move it there")
    for part in [batch_dir, *batch_dir.parents]:
        if part == root or not part.is_relative_to(root):
            break
        if part.is_symlink():
            target = part.resolve()
            where = "inside" if target.is_relative_to(root) else "outside"
            return (f"the folder {part.relative_to(root).as_posix()} is a symbolic link to "
                    f"{target} ({where} the raw folder); batches are read from their real "
                    "folder only: move the batch there or remove the link")
    return None


def manifest_problem(root: Path, manifest: Path) -> str | None:
    """Why ``manifest`` (a batch.toml) is refused before it is opened, or None: a symbolic
    link leaving the raw folder."""
    if manifest.is_symlink():
        target = manifest.resolve()
        if not target.is_relative_to(root):
            return (f"batch.toml is a symbolic link to {target}, outside the raw folder; "
                    "refused")
    return None


def table_file(batch_dir: Path, name: str, label: str) -> Path:
    """The table file, refusing any path (or symlink) that leaves the batch folder."""
    path = batch_dir / name
    try:
        resolved = path.resolve(strict=True)
    except FileNotFoundError:
        raise BatchError(f"table file '{name}' named in batch.toml does not exist",
                         file=label) from None
    except (OSError, RuntimeError) as err:    # a symlink loop
        raise BatchError(f"table file '{name}' cannot be resolved: {err}", file=label) from None
    if not resolved.is_relative_to(batch_dir.resolve()):
        raise BatchError(f"table file '{name}' resolves outside the batch folder "
                         f"({resolved}); refused", file=label)
    return resolved


def batch_file_hashes(raw: Path, folder: Path, rel: str,
                      known: dict[str, str] | None = None) -> dict[str, str] | None:
    """The SHA-256 of a batch's batch.toml and table files (path relative to ``raw`` ->
    hash), read the way the ingest stage reads them; None when anything about them is odd
    (unreadable, not a regular file, malformed, a linked folder): the ingest stage then looks
    at the batch and says why. The nightly job's pre-scan compares these with the store.

    ``known``: the store's current hashes of the batch. When its batch.toml is unchanged,
    it names the same tables, so those files are hashed without parsing the TOML again."""
    from pipeline.ingest.rawread import MAX_TOML_BYTES, parse_toml, read_regular
    from pipeline.ingest.workbook import table_path

    if folder.is_symlink():
        return None
    try:
        data = read_regular(folder / MANIFEST, f"{rel}/{MANIFEST}", limit=MAX_TOML_BYTES)
        want = {f"{rel}/{MANIFEST}": hashlib.sha256(data).hexdigest()}
        digests: dict[Path, str] = {}      # the tables of one workbook share its file

        def digest(path: Path) -> str:
            if path not in digests:
                digests[path] = hashlib.sha256(read_regular(path, str(path))).hexdigest()
            return digests[path]

        if known and known.get(f"{rel}/{MANIFEST}") == want[f"{rel}/{MANIFEST}"]:
            for key in known:       # a workbook table's key is file#sheet
                if key != f"{rel}/{MANIFEST}":
                    want[key] = digest(raw / key.split("#", 1)[0])
            return want
        for table in parse_toml(data, f"{rel}/{MANIFEST}").get("table", []):
            if not _PLAIN_NAME.fullmatch(table["file"]):
                return None
            path = folder / table["file"]
            want[table_path(path.relative_to(raw).as_posix(), table)] = digest(path)
    except (FluidLedgerError, OSError, ValueError, KeyError, TypeError, AttributeError):
        return None
    return want
