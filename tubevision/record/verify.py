"""Check that evidence is unchanged: an RO-Crate zip, its unzipped folder, or output folders.

What is checked, by what the path holds:

* **RO-Crate** (a ``.zip`` or a folder with ``ro-crate-metadata.json``):
  every ``File`` entity's ``sha256`` and ``contentSize`` against the bytes
  in the crate; a listed file that is absent is *missing*; a file in the
  crate that the metadata does not list is *extra*.
* **Output folder** (a folder with ``record.json``): each file against
  ``manifest.sha256`` when the folder has one (then unlisted files are
  *extra*).
* **Cross-checks**, in both: the photo named by a record's ``image.file``
  (in the same folder, else anywhere in the crate or beside the folder)
  against the record's ``image.sha256``; a ``report.html`` against the
  ``record.json`` and ``annotated.png`` beside it, through the SHA-256 the
  report carries in its ``<meta>`` elements and the image it embeds.

A folder holding several output folders (``tubevision analyze --out DIR``)
is checked folder by folder.

The manifest is the text that GNU coreutils ``sha256sum`` writes and
``sha256sum -c`` reads: one ``<hex digest>  <file name>`` line per file
(common practice), so it can be checked without this tool too.

References
----------
.. [1] NIST FIPS 180-4, "Secure Hash Standard (SHS)", 2015,
   DOI 10.6028/NIST.FIPS.180-4 (SHA-256, via Python's ``hashlib``).
.. [2] RO-Crate Metadata Specification 1.1, https://w3id.org/ro/crate/1.1
   (the metadata layout read here; see :mod:`.crate`).
"""

from __future__ import annotations

import base64
import hashlib
import json
import os
import re
import zipfile
from dataclasses import dataclass, field
from html.parser import HTMLParser
from pathlib import Path, PurePosixPath
from typing import Iterator

from ..errors import TubevisionInputError
from .crate import CRATE_METADATA_NAME, HASH_CHUNK_BYTES, arcname_of_id
from .report import META_ANNOTATED_SHA256, META_RECORD_SHA256

__all__ = ["MANIFEST_NAME", "VerifyResult", "verify", "manifest_sha256", "parse_manifest"]

MANIFEST_NAME = "manifest.sha256"
"""Name of an output folder's hash list (``sha256sum`` format)."""

_HEX64 = re.compile(r"[0-9a-fA-F]{64}")
_MANIFEST_LINE = re.compile(r"^([0-9a-fA-F]{64}) [ *](.+)$")
"""``sha256sum`` output line: digest, a space, a space (text) or ``*`` (binary), the name."""


@dataclass(frozen=True)
class VerifyResult:
    """What :func:`verify` found. Truthy when nothing was changed, missing or extra.

    Attributes
    ----------
    path : str — what was checked.
    kind : str — ``"crate zip"``, ``"crate folder"``, ``"output folder"`` or ``"output folders"``.
    checked : tuple of str — files whose hash matched what was recorded for them.
    changed : tuple of str — files whose bytes differ from their recorded hash or size.
    missing : tuple of str — files that were recorded but are absent.
    extra : tuple of str — files present but recorded nowhere (where a complete list exists).
    problems : tuple of str — one line per finding, saying which file and against what.
    notes : tuple of str — what could not be checked, and why.
    """

    path: str
    kind: str
    checked: tuple[str, ...] = ()
    changed: tuple[str, ...] = ()
    missing: tuple[str, ...] = ()
    extra: tuple[str, ...] = ()
    problems: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()

    @property
    def ok(self) -> bool:
        """True when nothing was changed, missing or extra."""
        return not (self.changed or self.missing or self.extra)

    def __bool__(self) -> bool:
        return self.ok

    @property
    def exit_status(self) -> int:
        """What ``tubevision verify`` exits with: 0 all matched, 1 a mismatch was found."""
        return 0 if self.ok else 1

    def lines(self) -> list[str]:
        """A short account for a person: a status line, then findings and notes."""
        head = (f"{self.path}: {self.kind}, {len(self.checked)} file(s) match"
                + ("" if self.ok else f"; {len(self.changed)} changed, {len(self.missing)} missing, "
                   f"{len(self.extra)} extra"))
        return [head, *(f"  MISMATCH {p}" for p in self.problems), *(f"  note: {n}" for n in self.notes)]


@dataclass
class _Findings:
    checked: list[str] = field(default_factory=list)
    changed: list[str] = field(default_factory=list)
    missing: list[str] = field(default_factory=list)
    extra: list[str] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def ok(self, name: str) -> None:
        if name not in self.checked:
            self.checked.append(name)

    def bad(self, kind: str, name: str, why: str) -> None:
        lst = getattr(self, kind)
        if name not in lst:
            lst.append(name)
        if name in self.checked:
            self.checked.remove(name)
        self.problems.append(f"{name}: {why}")

    def result(self, path: Path, kind: str) -> VerifyResult:
        checked = [c for c in self.checked if c not in self.changed]
        return VerifyResult(str(path), kind, tuple(checked), tuple(self.changed), tuple(self.missing),
                            tuple(self.extra), tuple(self.problems), tuple(dict.fromkeys(self.notes)))


class _Store:
    """Files by ``/``-separated relative name, in a zip or under a folder."""

    def __init__(self, root: Path, zf: zipfile.ZipFile | None = None):
        self.root, self.zf = root, zf
        if zf is not None:
            self._names = [i.filename for i in zf.infolist() if not i.is_dir()]
        else:
            self._names = sorted(p.relative_to(root).as_posix() for p in root.rglob("*")
                                 if p.is_file() and not any(part.startswith(".")
                                                            for part in p.relative_to(root).parts))
        self._cache: dict[str, tuple[str, int] | None] = {}

    def names(self) -> list[str]:
        return list(self._names)

    def has(self, name: str) -> bool:
        return name in self._names

    def _chunks(self, name: str) -> Iterator[bytes]:
        fh = self.zf.open(name) if self.zf is not None else open(self.root / name, "rb")
        with fh:
            yield from iter(lambda: fh.read(HASH_CHUNK_BYTES), b"")

    def digest(self, name: str) -> tuple[str, int] | None:
        """(sha256 hex, size) of a file; None when its bytes cannot be read (a damaged zip member)."""
        if name not in self._cache:
            h, n = hashlib.sha256(), 0
            try:
                for chunk in self._chunks(name):
                    h.update(chunk)
                    n += len(chunk)
                self._cache[name] = (h.hexdigest(), n)
            except (zipfile.BadZipFile, OSError, EOFError):
                self._cache[name] = None
        return self._cache[name]

    def read(self, name: str) -> bytes | None:
        try:
            return b"".join(self._chunks(name))
        except (zipfile.BadZipFile, OSError, EOFError):
            return None


def manifest_sha256(files: dict[str, bytes]) -> bytes:
    """``manifest.sha256`` for an output folder: one ``sha256sum`` line per file, sorted by name.

    Parameters
    ----------
    files : dict — file name → content, as :func:`tubevision.record.write.write_folder` takes.

    Returns
    -------
    bytes — UTF-8 text; the manifest does not list itself.

    Raises
    ------
    TubevisionInputError
        A file name holds a line break or backslash (``sha256sum`` would escape it).

    Examples
    --------
    >>> manifest_sha256({"a.txt": b"abc"}).decode()
    'ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad  a.txt\\n'
    """
    lines = []
    for name in sorted(files):
        if name == MANIFEST_NAME:
            continue
        if any(c in name for c in "\n\r\\"):
            raise TubevisionInputError(f"{name!r}: file names in a manifest cannot hold line breaks "
                                       "or backslashes")
        lines.append(f"{hashlib.sha256(files[name]).hexdigest()}  {name}\n")
    return "".join(lines).encode("utf-8")


def parse_manifest(text: str) -> tuple[dict[str, str], list[int]]:
    """Read ``sha256sum`` lines: (name → lower-case digest, numbers of lines that did not parse)."""
    out: dict[str, str] = {}
    bad: list[int] = []
    for i, line in enumerate(text.splitlines(), 1):
        if not line.strip():
            continue
        m = _MANIFEST_LINE.match(line)
        if m is None:
            bad.append(i)
        else:
            out[m.group(2)] = m.group(1).lower()
    return out, bad


class _MetaReader(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.meta: dict[str, str] = {}
        self.images: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "meta" and a.get("name") and a.get("content") is not None:
            self.meta[a["name"]] = a["content"]
        elif tag == "img" and (a.get("src") or "").startswith("data:image/png;base64,"):
            self.images.append(a["src"].split(",", 1)[1])


def _parent(name: str) -> str:
    p = str(PurePosixPath(name).parent)
    return "" if p == "." else p + "/"


def _check_record_folder(store: _Store, rec_name: str, f: _Findings, *, outside: Path | None) -> None:
    """Cross-checks around one ``record.json``: photo hash, report ↔ record, report ↔ image."""
    folder = _parent(rec_name)
    dig = store.digest(rec_name)
    raw = store.read(rec_name)
    try:
        rec = json.loads(raw.decode("utf-8")) if raw is not None else None
    except (UnicodeDecodeError, ValueError):
        rec = None
    if not isinstance(rec, dict):
        f.bad("changed", rec_name, "cannot be read as a JSON evidence record")
        return
    image = rec.get("image") if isinstance(rec.get("image"), dict) else {}
    photo, want = image.get("file"), str(image.get("sha256") or "").lower()
    if photo and _HEX64.fullmatch(want):
        base = PurePosixPath(str(photo)).name
        here = folder + base
        cands = [here] if store.has(here) else [n for n in store.names() if PurePosixPath(n).name == base]
        if len(cands) == 1:
            got = store.digest(cands[0])
            if got is None or got[0] != want:
                f.bad("changed", cands[0], f"SHA-256 differs from image.sha256 in {rec_name}")
            else:
                f.ok(cands[0])
        elif outside is not None and (outside / base).is_file():
            from .crate import sha256_file

            if sha256_file(outside / base) != want:
                f.bad("changed", str(outside / base), f"SHA-256 differs from image.sha256 in {rec_name}")
            else:
                f.ok(str(outside / base))
        elif len(cands) > 1:
            f.notes.append(f"{rec_name}: several files are named {base}; the photo's hash was not checked")
        else:
            f.notes.append(f"{rec_name}: photo {base} is not here; its hash was not checked")
    report = folder + "report.html"
    if store.has(report):
        data = store.read(report)
        reader = _MetaReader()
        try:
            reader.feed((data or b"").decode("utf-8"))
        except UnicodeDecodeError:
            f.bad("changed", report, "is not UTF-8 HTML")
            return
        claimed = reader.meta.get(META_RECORD_SHA256)
        if claimed and dig is not None:
            if claimed.lower() != dig[0]:
                f.bad("changed", rec_name, f"differs from the record {report} was made from")
            else:
                f.ok(rec_name)
        elif not claimed:
            f.notes.append(f"{report}: states no record hash; {rec_name} not checked against it")
        annotated = folder + "annotated.png"
        claimed_png = reader.meta.get(META_ANNOTATED_SHA256)
        if claimed_png:
            embedded = [hashlib.sha256(base64.b64decode(s, validate=False)).hexdigest()
                        for s in reader.images]
            if embedded and claimed_png.lower() not in embedded:
                f.bad("changed", report, "its embedded image differs from the hash it states")
            if store.has(annotated):
                got = store.digest(annotated)
                if got is None or got[0] != claimed_png.lower():
                    f.bad("changed", annotated, f"differs from the image embedded in {report}")
                else:
                    f.ok(annotated)


def _check_crate(store: _Store, f: _Findings) -> None:
    raw = store.read(CRATE_METADATA_NAME)
    try:
        meta = json.loads(raw.decode("utf-8")) if raw is not None else None
        graph = meta["@graph"]
        if not isinstance(graph, list):
            raise TypeError
    except (UnicodeDecodeError, ValueError, TypeError, KeyError):
        f.bad("changed", CRATE_METADATA_NAME, "cannot be read as RO-Crate JSON-LD; nothing could be checked")
        return
    listed: set[str] = set()
    for ent in graph:
        if not isinstance(ent, dict):
            continue
        types = ent.get("@type")
        types = types if isinstance(types, list) else [types]
        eid = ent.get("@id")
        if "File" not in types or not isinstance(eid, str):
            continue
        if eid.startswith("#") or "://" in eid:
            f.notes.append(f"{eid}: a web resource, not in the crate; not checked")
            continue
        name = arcname_of_id(eid)
        listed.add(name)
        if not store.has(name):
            f.bad("missing", name, f"listed in {CRATE_METADATA_NAME} but not in the crate")
            continue
        got = store.digest(name)
        want = str(ent.get("sha256") or "").lower()
        size = ent.get("contentSize")
        if got is None:
            f.bad("changed", name, "its bytes cannot be read (damaged archive member)")
        elif _HEX64.fullmatch(want) and got[0] != want:
            f.bad("changed", name, f"SHA-256 differs from {CRATE_METADATA_NAME}")
        elif size is not None and str(size) != str(got[1]):
            f.bad("changed", name, f"size {got[1]} bytes differs from {CRATE_METADATA_NAME} ({size})")
        elif not _HEX64.fullmatch(want):
            f.notes.append(f"{name}: no SHA-256 in {CRATE_METADATA_NAME}; not checked")
        else:
            f.ok(name)
    for name in store.names():
        if name != CRATE_METADATA_NAME and name not in listed:
            f.bad("extra", name, f"in the crate but not listed in {CRATE_METADATA_NAME}")
    for name in store.names():
        if PurePosixPath(name).name == "record.json" and name not in f.missing:
            _check_record_folder(store, name, f, outside=None)


def _check_output_folder(store: _Store, f: _Findings, *, outside: Path | None) -> None:
    if store.has(MANIFEST_NAME):
        text = (store.read(MANIFEST_NAME) or b"").decode("utf-8", "replace")
        listed, bad_lines = parse_manifest(text)
        if bad_lines:
            f.bad("changed", MANIFEST_NAME,
                  f"line(s) {', '.join(map(str, bad_lines))} are not sha256sum lines")
        for name, want in listed.items():
            if not store.has(name):
                f.bad("missing", name, f"listed in {MANIFEST_NAME} but absent")
                continue
            got = store.digest(name)
            if got is None or got[0] != want:
                f.bad("changed", name, f"SHA-256 differs from {MANIFEST_NAME}")
            else:
                f.ok(name)
        for name in store.names():
            if name != MANIFEST_NAME and name not in listed:
                f.bad("extra", name, f"not listed in {MANIFEST_NAME}")
    else:
        f.notes.append(f"no {MANIFEST_NAME}: record, annotated image and photo are checked against "
                       "the report and the record only; the report itself and extra files cannot be checked")
    _check_record_folder(store, "record.json", f, outside=outside)


def _prefixed(res: VerifyResult, prefix: str) -> dict[str, list[str]]:
    def p(names):
        return [n if os.path.isabs(n) else prefix + n for n in names]
    return {"checked": p(res.checked), "changed": p(res.changed), "missing": p(res.missing),
            "extra": p(res.extra), "problems": [prefix + x for x in res.problems],
            "notes": [prefix + x for x in res.notes]}


def verify(path: str | os.PathLike) -> VerifyResult:
    """Check an archive or output folder against the hashes recorded for its files.

    Parameters
    ----------
    path : path — an RO-Crate ``.zip`` written by :func:`tubevision.record.crate.write_crate`,
        an unzipped crate folder, one output folder (``record.json`` …) or a
        folder of output folders.

    Returns
    -------
    VerifyResult — truthy when nothing is changed, missing or extra; its
        ``problems`` name each file at fault and ``notes`` what went unchecked.

    Raises
    ------
    TubevisionInputError
        ``path`` does not exist, is not a zip, is a zip without RO-Crate
        metadata, or a folder with nothing to check.
    """
    p = Path(path)
    if not p.exists():
        raise TubevisionInputError(f"{p}: no such file or folder")
    f = _Findings()
    if p.is_file():
        if p.name == "record.json":
            return verify(p.parent)
        if not zipfile.is_zipfile(p):
            raise TubevisionInputError(f"{p}: not a zip archive or an output folder; give an archive "
                                       "made by tubevision or a folder")
        try:
            with zipfile.ZipFile(p) as zf:
                store = _Store(p, zf)
                if not store.has(CRATE_METADATA_NAME):
                    raise TubevisionInputError(
                        f"{p}: holds no {CRATE_METADATA_NAME}; not an RO-Crate archive")
                _check_crate(store, f)
        except zipfile.BadZipFile as exc:
            raise TubevisionInputError(f"{p}: damaged zip archive ({exc})") from None
        return f.result(p, "crate zip")
    if (p / CRATE_METADATA_NAME).is_file():
        _check_crate(_Store(p), f)
        return f.result(p, "crate folder")
    if (p / "record.json").is_file():
        _check_output_folder(_Store(p), f, outside=p.parent)
        return f.result(p, "output folder")
    subs = sorted(q.parent for q in p.rglob("record.json")
                  if not any(part.startswith(".") for part in q.relative_to(p).parts))
    if not subs:
        raise TubevisionInputError(f"{p}: holds no record.json or {CRATE_METADATA_NAME}; nothing to verify")
    merged: dict[str, list[str]] = {k: [] for k in ("checked", "changed", "missing", "extra",
                                                    "problems", "notes")}
    for sub in subs:
        rel = sub.relative_to(p).as_posix() + "/"
        for k, v in _prefixed(verify(sub), rel).items():
            merged[k].extend(v)
    return VerifyResult(str(p), "output folders", *(tuple(merged[k]) for k in
                                                     ("checked", "changed", "missing", "extra",
                                                      "problems", "notes")))
