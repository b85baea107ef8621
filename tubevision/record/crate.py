"""An archive for notebook systems: the photos and their evidence as an RO-Crate 1.1 zip.

The zip holds the files as they are, under their paths relative to a common
base folder, and ``ro-crate-metadata.json`` at its root: a JSON-LD document
describing the crate (the metadata descriptor, the root Data Entity ``./``)
and one ``File`` entity per file with its media type, size and SHA-256.
Each evidence record also gets a ``CreateAction`` linking the photo it was
made from (``object``) to the files the run produced (``result``), with the
software as ``instrument``.

:func:`tubevision.record.verify.verify` checks such a zip (or its unzipped
folder) against the hashes written here.

References
----------
.. [1] S. Soiland-Reyes, P. Sefton, M. Crosas et al., "RO-Crate Metadata
   Specification 1.1", 2020, https://w3id.org/ro/crate/1.1,
   DOI 10.5281/zenodo.4031327. Sections "Root Data Entity" (metadata
   descriptor, required root properties), "Data Entities" (File entities,
   ``encodingFormat``, ``contentSize``) and "Provenance of entities"
   (``CreateAction``, ``instrument``, ``object``, ``result``).
.. [2] PKWARE, ".ZIP File Format Specification", APPNOTE.TXT version 6.3.x
   (as implemented by Python's ``zipfile``).
.. [3] IANA Media Types registry, https://www.iana.org/assignments/media-types
   (the ``encodingFormat`` strings).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import io
import json
import os
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from urllib.parse import quote, unquote

from .. import __version__
from ..errors import TubevisionInputError
from .write import atomic_write_bytes

__all__ = [
    "CRATE_METADATA_NAME", "RO_CRATE_CONTEXT", "RO_CRATE_SPEC", "DEFAULT_LICENSE",
    "CrateFile", "crate_file", "crate_metadata", "write_crate", "archive_inputs",
    "arcname_of_id", "sha256_file",
]

CRATE_METADATA_NAME = "ro-crate-metadata.json"
"""Name of the RO-Crate metadata file at the crate root ([1]_, "RO-Crate Metadata File")."""
RO_CRATE_CONTEXT = "https://w3id.org/ro/crate/1.1/context"
"""JSON-LD ``@context`` of RO-Crate 1.1 ([1]_)."""
RO_CRATE_SPEC = "https://w3id.org/ro/crate/1.1"
"""What the metadata descriptor ``conformsTo`` ([1]_)."""
DEFAULT_LICENSE = ("https://creativecommons.org/licenses/by/4.0/", "CC BY 4.0")
"""Licence of the crate unless the caller names another (URI, name). Our
default; the user's institution may require a different one."""

HASH_CHUNK_BYTES = 1 << 20
"""Read size when hashing files (1 MiB: large enough for speed, small in memory; our choice)."""

MEDIA_TYPES: dict[str, str] = {
    ".jpg": "image/jpeg", ".jpeg": "image/jpeg", ".png": "image/png", ".tif": "image/tiff",
    ".tiff": "image/tiff", ".heic": "image/heic", ".heif": "image/heif", ".webp": "image/webp",
    ".json": "application/json", ".html": "text/html", ".htm": "text/html", ".css": "text/css",
    ".csv": "text/csv", ".txt": "text/plain", ".sha256": "text/plain", ".md": "text/markdown",
    ".pdf": "application/pdf", ".toml": "application/toml", ".svg": "image/svg+xml",
}
"""File suffix → IANA media type ([3]_); anything else is ``application/octet-stream``."""

_STORED_SUFFIXES = {".jpg", ".jpeg", ".png", ".heic", ".heif", ".webp", ".pdf"}
"""Already-compressed formats, stored without deflate (compressing them again gains nothing)."""

_ROLE_DESCRIPTIONS = {
    "record.json": "Evidence record (tubevision.record/1): calibrated measurements and verdicts per tube",
    "report.html": "Report for people: annotated photo, tube table, calibration, warnings, provenance",
    "annotated.png": "Annotated photo: the tubes and regions the tool measured",
    "tubes.csv": "One row per tube with the record's numbers",
    "manifest.sha256": "SHA-256 of each file of the output folder (sha256sum format)",
}


@dataclass(frozen=True)
class CrateFile:
    """One file going into a crate.

    Attributes
    ----------
    source : Path — where the file is read from.
    arcname : str — its path inside the crate, ``/``-separated, relative.
    size : int — bytes.
    sha256 : str — hex digest of its bytes.
    encoding_format : str — IANA media type.
    """

    source: Path
    arcname: str
    size: int
    sha256: str
    encoding_format: str


def sha256_file(path: str | os.PathLike) -> str:
    """SHA-256 (hex) of a file's bytes, read in chunks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(HASH_CHUNK_BYTES), b""):
            h.update(chunk)
    return h.hexdigest()


def _id_of(arcname: str) -> str:
    """The JSON-LD ``@id`` of a file: its relative path as a URI reference (RFC 3986 escaping)."""
    return quote(arcname, safe="/")


def arcname_of_id(entity_id: str) -> str:
    """Inverse of the ``@id`` escaping: the path inside the zip."""
    return unquote(entity_id)


def crate_file(path: Path, arcname: str) -> CrateFile:
    """Describe one file (hash, size, media type) for :func:`crate_metadata`."""
    return CrateFile(source=path, arcname=arcname, size=path.stat().st_size, sha256=sha256_file(path),
                     encoding_format=MEDIA_TYPES.get(path.suffix.lower(), "application/octet-stream"))


def _file_entity(f: CrateFile) -> dict[str, Any]:
    ent: dict[str, Any] = {
        "@id": _id_of(f.arcname), "@type": "File", "name": f.arcname.rsplit("/", 1)[-1],
        "encodingFormat": f.encoding_format, "contentSize": str(f.size), "sha256": f.sha256,
    }
    desc = _ROLE_DESCRIPTIONS.get(ent["name"])
    if desc:
        ent["description"] = desc
    return ent


def _read_record(f: CrateFile) -> dict | None:
    if f.arcname.rsplit("/", 1)[-1] != "record.json":
        return None
    try:
        rec = json.loads(f.source.read_text("utf-8"))
    except (OSError, ValueError):
        return None
    return rec if isinstance(rec, dict) and isinstance(rec.get("image"), dict) else None


def _actions(files: list[CrateFile], by_arc: dict[str, dict]) -> list[dict[str, Any]]:
    """``CreateAction`` entities, one per evidence record ([1]_, "Provenance of entities")."""
    actions = []
    by_sha = {f.sha256: f for f in files}
    for f in files:
        rec = _read_record(f)
        if rec is None:
            continue
        folder = f.arcname.rsplit("/", 1)[0] + "/" if "/" in f.arcname else ""
        results = [{"@id": _id_of(g.arcname)} for g in files
                   if g.arcname.startswith(folder) and "/" not in g.arcname[len(folder):]
                   and g.arcname[len(folder):] in _ROLE_DESCRIPTIONS]
        act: dict[str, Any] = {"@id": f"#run-{len(actions) + 1}", "@type": "CreateAction",
                               "name": f"tubevision analysis of {rec['image'].get('file') or 'a photo'}",
                               "instrument": {"@id": "#tubevision"}, "result": results}
        photo = by_sha.get(str(rec["image"].get("sha256")))
        if photo is not None:
            act["object"] = [{"@id": _id_of(photo.arcname)}]
            by_arc[f.arcname]["about"] = {"@id": _id_of(photo.arcname)}
        prov = rec.get("provenance") if isinstance(rec.get("provenance"), dict) else {}
        ran_at = prov.get("ran_at")
        if ran_at:
            act["endTime"] = str(ran_at)
        actions.append(act)
    return actions


def crate_metadata(files: list[CrateFile], *, name: str, description: str,
                   date_published: str | None = None,
                   license: tuple[str, str] = DEFAULT_LICENSE) -> dict[str, Any]:
    """The ``ro-crate-metadata.json`` document for a list of files.

    Parameters
    ----------
    files : list of CrateFile — the crate's payload (not the metadata file itself).
    name, description : str — the root Data Entity's ``name`` and ``description``.
    date_published : str or None — ISO 8601; ``None`` means now (UTC, seconds).
    license : (uri, name) — the crate's licence, a contextual entity.

    Returns
    -------
    dict — JSON-LD with ``@context`` and a flat ``@graph`` ([1]_).
    """
    if date_published is None:
        date_published = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    lic_id, lic_name = license
    entities = [_file_entity(f) for f in files]
    by_arc = {f.arcname: e for f, e in zip(files, entities)}
    actions = _actions(files, by_arc)
    graph: list[dict[str, Any]] = [
        {"@id": CRATE_METADATA_NAME, "@type": "CreativeWork",
         "conformsTo": {"@id": RO_CRATE_SPEC}, "about": {"@id": "./"}},
        {"@id": "./", "@type": "Dataset", "name": name, "description": description,
         "datePublished": date_published, "license": {"@id": lic_id},
         "hasPart": [{"@id": e["@id"]} for e in entities]},
        {"@id": lic_id, "@type": "CreativeWork", "name": lic_name},
        {"@id": "#tubevision", "@type": "SoftwareApplication", "name": "tubevision",
         "version": __version__},
    ]
    if actions:
        graph[1]["mentions"] = [{"@id": a["@id"]} for a in actions]
    graph.extend(entities)
    graph.extend(actions)
    return {"@context": RO_CRATE_CONTEXT, "@graph": graph}


def _check_arcname(arc: str, path: Path) -> None:
    parts = arc.split("/")
    if arc.startswith("/") or any(p in ("", ".", "..") for p in parts):
        raise TubevisionInputError(f"{path}: cannot be placed in the archive as {arc!r}")
    if arc == CRATE_METADATA_NAME:
        raise TubevisionInputError(f"{path}: its name is reserved for the crate's own metadata; "
                                   "archive the folder above it or rename it")


def archive_inputs(paths: list[str | os.PathLike], *,
                   exclude: str | os.PathLike | None = None) -> tuple[list[Path], Path]:
    """Expand files and folders given on a command line into files and their common base.

    Folders contribute all their files, recursively, except hidden ones (names
    starting with ``.``, such as half-written temporaries). Each folder keeps
    its own name inside the archive: the base is the common parent of the
    given paths. ``exclude`` (the archive being written, when it lies inside
    one of the folders) is left out.

    Raises
    ------
    TubevisionInputError
        A path does not exist, or nothing is left to archive.
    """
    if not paths:
        raise TubevisionInputError("archive: give at least one file or folder to archive")
    files: list[Path] = []
    parents: list[str] = []
    skip = Path(exclude).resolve() if exclude is not None else None
    for raw in paths:
        p = Path(raw)
        if not p.exists():
            raise TubevisionInputError(f"{p}: no such file or folder")
        p = p.resolve()
        parents.append(str(p.parent))
        if p.is_dir():
            for q in sorted(p.rglob("*")):
                rel = q.relative_to(p)
                if q.is_file() and not any(part.startswith(".") for part in rel.parts) and q != skip:
                    files.append(q)
        elif p.is_file():
            files.append(p)
    if not files:
        raise TubevisionInputError("archive: the given folders hold no files")
    return files, Path(os.path.commonpath(parents))


def write_crate(zip_path: str | os.PathLike, files: list[str | os.PathLike], *,
                base: str | os.PathLike | None = None,
                name: str = "tubevision evidence",
                description: str = "Photos of test-tube racks with their calibrated evidence records, "
                                   "reports, annotated images and tables, made by tubevision.",
                date_published: str | None = None,
                license: tuple[str, str] = DEFAULT_LICENSE,
                overwrite: bool = False) -> Path:
    """Write files and their RO-Crate 1.1 metadata into one zip.

    Parameters
    ----------
    zip_path : path — the archive to create; must end in ``.zip``.
    files : list of paths — regular files to include (photos, records, reports,
        annotated images, CSV…).
    base : path or None — the folder their paths in the zip are relative to;
        default: the common parent folder of all files.
    name, description, date_published, license : see :func:`crate_metadata`.
    overwrite : bool — replace an existing ``zip_path``; otherwise refuse.

    Returns
    -------
    Path — ``zip_path``.

    Raises
    ------
    TubevisionInputError
        ``zip_path`` exists (and ``overwrite`` is False) or does not end in
        ``.zip``; a file is missing, outside ``base``, listed twice, or would
        take the metadata file's name.
    """
    zp = Path(zip_path)
    if zp.suffix.lower() != ".zip":
        raise TubevisionInputError(f"{zp}: the archive name must end in .zip")
    if zp.exists() and not overwrite:
        raise TubevisionInputError(f"{zp}: already exists; choose another name or allow overwriting")
    if not files:
        raise TubevisionInputError("archive: no files to archive")
    paths = []
    for f in files:
        p = Path(f)
        if not p.is_file():
            raise TubevisionInputError(f"{p}: no such file")
        paths.append(p.resolve())
    if zp.resolve() in paths:
        raise TubevisionInputError(f"{zp}: the archive cannot contain itself")
    root = (Path(base).resolve() if base is not None
            else Path(os.path.commonpath([str(p.parent) for p in paths])))
    entries: list[CrateFile] = []
    seen: set[str] = set()
    for p in paths:
        try:
            arc = p.relative_to(root).as_posix()
        except ValueError:
            raise TubevisionInputError(f"{p}: not inside the archive's base folder {root}") from None
        _check_arcname(arc, p)
        if arc in seen:
            raise TubevisionInputError(f"{p}: listed twice")
        seen.add(arc)
        entries.append(crate_file(p, arc))
    meta = crate_metadata(entries, name=name, description=description,
                          date_published=date_published, license=license)
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        zf.writestr(zipfile.ZipInfo(CRATE_METADATA_NAME, _zip_time(None)),
                    json.dumps(meta, indent=2, ensure_ascii=False) + "\n",
                    compress_type=zipfile.ZIP_DEFLATED)
        for e in entries:
            info = zipfile.ZipInfo(e.arcname, _zip_time(e.source))
            info.compress_type = (zipfile.ZIP_STORED if e.source.suffix.lower() in _STORED_SUFFIXES
                                  else zipfile.ZIP_DEFLATED)
            with open(e.source, "rb") as src, zf.open(info, "w") as dst:
                for chunk in iter(lambda: src.read(HASH_CHUNK_BYTES), b""):
                    dst.write(chunk)
    return atomic_write_bytes(zp, buf.getvalue(), overwrite=overwrite)


def _zip_time(path: Path | None) -> tuple[int, int, int, int, int, int]:
    """A zip member's local time stamp; zip cannot store dates before 1980 ([2]_, section 4.4.6)."""
    ts = path.stat().st_mtime if path is not None else _dt.datetime.now().timestamp()
    t = _dt.datetime.fromtimestamp(ts)
    if t.year < 1980:
        return (1980, 1, 1, 0, 0, 0)
    return (t.year, t.month, t.day, t.hour, t.minute, t.second)
