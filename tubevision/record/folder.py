"""One output folder per photo: ``DIR/<photo stem>/`` with the record and its companions.

Nothing is silently overwritten. When ``DIR/<stem>`` already holds a record
made with other settings (another card reference, scheme, step, labels…),
the new run writes alongside it, into ``DIR/<stem>@<settings digest>``;
when it holds one made with the same settings, the run stops with a clear
error unless ``overwrite`` is given.
"""

from __future__ import annotations

import json
from pathlib import Path

from ..errors import TubevisionInputError
from .annotate import annotate, encode_png
from .build import build_record, settings_digest, to_json
from .report import render_report
from .table import tubes_csv
from .verify import manifest_sha256
from .write import write_folder

__all__ = ["output_folder_for", "write_photo_outputs", "photo_output_files"]


def _digest_of(folder: Path) -> str | None:
    try:
        rec = json.loads((folder / "record.json").read_text("utf-8"))
        return rec.get("provenance", {}).get("settings_sha256")
    except (OSError, ValueError, AttributeError):
        return None


def output_folder_for(out_dir: Path, photo_path: Path, digest: str, *, overwrite: bool) -> Path:
    """Where this run's files go; see the module docstring for the rule.

    Raises
    ------
    TubevisionInputError
        The folder for these very settings exists and ``overwrite`` is False.
    """
    base = out_dir / photo_path.stem
    if not base.exists() or overwrite and _digest_of(base) in (digest, None):
        return base
    if _digest_of(base) == digest:
        raise TubevisionInputError(f"{base}: already holds this photo's record made with the same "
                                   "settings; pass --overwrite to replace it")
    alt = out_dir / f"{photo_path.stem}@{digest[:10]}"
    if alt.exists() and not overwrite:
        raise TubevisionInputError(f"{alt}: already holds this photo's record made with the same "
                                   "settings; pass --overwrite to replace it")
    return alt


def photo_output_files(analysis, record: dict) -> dict[str, bytes]:
    """The files of one photo's output folder, by name."""
    png = encode_png(annotate(analysis.photo.pixels, record))
    files = {"record.json": to_json(record).encode("utf-8"), "annotated.png": png}
    files["report.html"] = render_report(record, png).encode("utf-8")
    files["tubes.csv"] = tubes_csv(record).encode("utf-8")
    files["manifest.sha256"] = manifest_sha256(files)  # last: it lists the files above
    return files


def write_photo_outputs(out_dir: Path, photo_path: Path, analysis, *, overwrite: bool = False) -> Path:
    """Build the record and write the photo's output folder atomically; returns the folder."""
    record = build_record(analysis)
    target = output_folder_for(Path(out_dir), Path(photo_path), settings_digest(analysis),
                               overwrite=overwrite)
    return write_folder(target, photo_output_files(analysis, record), overwrite=overwrite)
