"""Per-source cache for incremental builds: reuse what an unchanged source produced last time.

A source's contribution to the package (its individual rows, population summaries, rejects,
name matches and cell account) depends only on its file, its mapping, its decisions file and a
few project-wide settings. `source_key` hashes exactly those; when the key is unchanged, the
build takes the stored frames instead of reading the file again. Entries are Parquet files in
`.harmonize-cache/sources/<source>/<key>/` under the project root, written to a temporary folder
and renamed into place, so a killed build never leaves half an entry. Only the latest entry of
each source is kept.

A cache problem never fails a build: an entry that cannot be read is a miss, an entry that
cannot be written is skipped. What the frames hold, and how they are combined, is `build`'s job.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import re
import shutil
import tempfile
from functools import lru_cache
from pathlib import Path

import pandas as pd
import pyarrow as pa

from harmonize import __version__
from harmonize.project import Mapping, Project

CACHE_FOLDER_NAME = ".harmonize-cache"
# Bump when the layout of an entry changes; old entries then miss and are replaced.
CACHE_FORMAT = 1
_META = "meta.json"
_SAFE_NAME = re.compile(r"[^A-Za-z0-9._-]")


def default_cache_folder(project: Project) -> Path:
    return project.root / CACHE_FOLDER_NAME


def _file_digest(path: Path | None) -> str | None:
    if path is None or not path.is_file():
        return None
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


@lru_cache(maxsize=1)
def code_fingerprint() -> str:
    """Hash of the installed harmonize package files: an edited checkout keeps its version
    number, but must not reuse outputs made by the code before the edit."""
    package = Path(__file__).resolve().parent
    digest = hashlib.sha256(__version__.encode())
    for path in sorted(package.rglob("*")):
        if path.is_file() and "__pycache__" not in path.parts and path.suffix != ".pyc":
            digest.update(path.relative_to(package).as_posix().encode() + b"\0")
            digest.update(path.read_bytes())
    return digest.hexdigest()


def _relative(path: Path, root: Path) -> str:
    try:
        return path.resolve().relative_to(root.resolve()).as_posix()
    except ValueError:
        return path.as_posix()


def source_key(
    project: Project, mapping: Mapping, source_sha256: str, vocabulary_version: str
) -> str:
    """Everything that decides what one source contributes, hashed into one hex key."""
    described = dataclasses.asdict(mapping)
    described["path"] = _relative(mapping.path, project.root)
    described["mapping_file"] = _relative(mapping.mapping_file, project.root)
    settings = {
        "cache_format": CACHE_FORMAT,
        "code": code_fingerprint(),
        "source_sha256": source_sha256,
        "mapping": described,
        # the file too (when there is one), so that nothing a parsed mapping leaves out is missed
        "mapping_file_sha256": _file_digest(mapping.mapping_file),
        "decisions_sha256": _file_digest(mapping.decisions_file),
        "vocabulary_version": vocabulary_version,
        "matching": dict(sorted(project.matching.items())),
        "temperature_correction": (
            dataclasses.asdict(project.temperature_correction)
            if project.temperature_correction
            else None
        ),
        "taxon_synonyms_sha256": _file_digest(project.taxon_synonyms),
        "limits": dataclasses.asdict(project.limits),
        "aggregate_individuals": project.aggregate_individuals,
    }
    text = json.dumps(settings, sort_keys=True, default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


@dataclasses.dataclass(frozen=True)
class CachedSource:
    frames: dict[str, pd.DataFrame]
    meta: dict


class SourceCache:
    """Stored per-source outputs under one folder, one entry (the newest key) per source."""

    def __init__(self, folder: Path) -> None:
        self.folder = Path(folder)

    def _source_folder(self, source_id: str) -> Path:
        return self.folder / "sources" / _SAFE_NAME.sub("_", source_id)

    def load(self, source_id: str, key: str) -> CachedSource | None:
        entry = self._source_folder(source_id) / key
        try:
            meta = json.loads((entry / _META).read_text(encoding="utf-8"))
            frames = {
                name: pd.read_parquet(entry / f"{name}.parquet") if stored else pd.DataFrame()
                for name, stored in meta["frames"].items()
            }
        except (OSError, ValueError, KeyError, pa.ArrowException):
            return None  # missing, removed meanwhile, or damaged: read the source instead
        return CachedSource(frames=frames, meta=meta["meta"])

    def store(self, source_id: str, key: str, frames: dict[str, pd.DataFrame], meta: dict) -> bool:
        """Store one source's frames; False (and nothing stored) if they cannot be stored."""
        home = self._source_folder(source_id)
        try:
            home.mkdir(parents=True, exist_ok=True)
            temporary = Path(tempfile.mkdtemp(prefix=".entry-", dir=home))
        except OSError:
            return False
        try:
            stored = {}
            for name, frame in frames.items():
                stored[name] = not frame.empty
                if not frame.empty:
                    frame.to_parquet(temporary / f"{name}.parquet", index=False)
            document = {"frames": stored, "meta": meta}
            (temporary / _META).write_text(json.dumps(document, sort_keys=True), encoding="utf-8")
            os.replace(temporary, home / key)
        except (OSError, ValueError, TypeError, pa.ArrowException):
            # a frame Parquet cannot hold, or an entry another build stored meanwhile
            shutil.rmtree(temporary, ignore_errors=True)
            return (home / key / _META).is_file()
        self._prune_source(home, keep=key)
        return True

    def _prune_source(self, home: Path, keep: str) -> None:
        for entry in home.iterdir():
            if entry.name != keep:
                shutil.rmtree(entry, ignore_errors=True)

    def prune(self, source_ids: list[str]) -> None:
        """Forget sources the project no longer has."""
        keep = {self._source_folder(s).name for s in source_ids}
        parent = self.folder / "sources"
        if parent.is_dir():
            for home in parent.iterdir():
                if home.name not in keep:
                    shutil.rmtree(home, ignore_errors=True)
