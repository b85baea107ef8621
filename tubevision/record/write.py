"""Atomic writes: a reader sees a whole output folder or none, never half of one.

Files are written into a temporary folder beside the target and renamed into
place (``os.replace``/``os.rename`` are atomic on one POSIX file system).
Nothing is silently overwritten: an existing file or folder is kept unless
the caller passes ``overwrite=True``.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

from ..errors import TubevisionInputError

__all__ = ["atomic_write_bytes", "atomic_write_text", "write_folder", "write_print_image"]


def atomic_write_bytes(path: str | os.PathLike, data: bytes, *, overwrite: bool = False) -> Path:
    """Write ``data`` to ``path`` through a temporary file and a rename.

    Raises
    ------
    TubevisionInputError
        ``path`` exists and ``overwrite`` is False, or its folder is missing.
    """
    p = Path(path)
    if p.exists() and not overwrite:
        raise TubevisionInputError(f"{p}: already exists; choose another name or allow overwriting")
    if not p.parent.is_dir():
        raise TubevisionInputError(f"{p.parent}: no such folder")
    fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".tmp", dir=p.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        if overwrite:
            os.replace(tmp, p)
        else:
            os.link(tmp, p)  # fails if p appeared meanwhile: never clobber
            os.unlink(tmp)
    except FileExistsError:
        os.unlink(tmp)
        raise TubevisionInputError(f"{p}: already exists; choose another name or allow overwriting") from None
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return p


def atomic_write_text(path: str | os.PathLike, text: str, *, overwrite: bool = False) -> Path:
    """:func:`atomic_write_bytes` for UTF-8 text."""
    return atomic_write_bytes(path, text.encode("utf-8"), overwrite=overwrite)


def write_print_image(path: str | os.PathLike, rgb, dpi: float, *, title: str, overwrite: bool = False) -> Path:
    """Write an sRGB image (H, W, 3 uint8) for printing at ``dpi``: ``.png`` with its
    resolution (pHYs chunk) or ``.pdf`` with a page of exactly that size (Pillow writes the
    page as pixels × 72 / dpi points), so it prints at true size at 100 % scale.

    Raises
    ------
    TubevisionInputError
        Another extension, or a file that exists and ``overwrite`` is False.
    """
    import io

    from PIL import Image

    p = Path(path)
    ext = p.suffix.lower()
    if ext not in (".png", ".pdf"):
        raise TubevisionInputError(f"{p}: write a .png or a .pdf file")
    if p.exists() and not overwrite:
        raise TubevisionInputError(f"{p}: already exists; pass --overwrite to replace it")
    buf = io.BytesIO()
    im = Image.fromarray(rgb)
    if ext == ".png":
        im.save(buf, "PNG", dpi=(dpi, dpi))
    else:
        im.save(buf, "PDF", resolution=float(dpi), title=title)
    return atomic_write_bytes(p, buf.getvalue(), overwrite=overwrite)


def write_folder(target: str | os.PathLike, files: dict[str, bytes], *, overwrite: bool = False) -> Path:
    """Write several files as one folder, atomically.

    Parameters
    ----------
    target : the folder to create (its parent must exist or is created).
    files : file name → content.
    overwrite : replace an existing ``target`` (the old one is removed only
        after the new one is complete).

    Raises
    ------
    TubevisionInputError
        ``target`` exists and ``overwrite`` is False.
    """
    t = Path(target)
    if t.exists() and not overwrite:
        raise TubevisionInputError(f"{t}: output folder already exists; pass --overwrite to replace it")
    try:
        t.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise TubevisionInputError(f"{t.parent}: cannot create output folder ({exc.strerror})") from None
    tmp = Path(tempfile.mkdtemp(prefix=f".{t.name}.", suffix=".tmp", dir=t.parent))
    try:
        for name, data in files.items():
            with open(tmp / name, "wb") as fh:
                fh.write(data)
                fh.flush()
                os.fsync(fh.fileno())
        if t.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{t.name}.", suffix=".old", dir=t.parent))
            os.rename(t, old / t.name)
            os.rename(tmp, t)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.rename(tmp, t)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return t
