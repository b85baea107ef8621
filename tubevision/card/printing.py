"""Write the printable card (PNG with DPI metadata, or PDF) at its true physical size."""

from __future__ import annotations

from pathlib import Path

from ..errors import TubevisionInputError
from .design import card_layout, render_card
from .reference import nominal_cgats_text

__all__ = ["write_card"]


def write_card(path: str | Path, *, dpi: int = 300, overwrite: bool = False) -> list[Path]:
    """Write the card to ``path`` (``.png`` or ``.pdf``) and its nominal values beside it.

    The PNG carries its resolution (pHYs chunk), the PDF a page of exactly the
    card's size (Pillow writes the page as pixels × 72 / dpi points), so either
    prints at true size at 100 % scale. The values go to ``<stem>.cgats.txt``
    in the form ``--card-ref`` reads.

    Raises
    ------
    TubevisionInputError
        Another extension, or a file that exists and ``overwrite`` is False.
    """
    from ..record.write import atomic_write_text, write_print_image

    p = Path(path)
    if p.suffix.lower() not in (".png", ".pdf"):
        raise TubevisionInputError(f"card --out {p}: write a .png or a .pdf file")
    cgats = p.with_name(p.stem + ".cgats.txt")
    for target in (p, cgats):
        if target.exists() and not overwrite:
            raise TubevisionInputError(f"{target}: already exists; pass --overwrite to replace it")
    lay = card_layout()
    write_print_image(p, render_card(dpi), dpi, title=f"tubevision card {lay.card_id} v{lay.version}",
                      overwrite=overwrite)
    atomic_write_text(cgats, nominal_cgats_text(), overwrite=overwrite)
    return [p, cgats]
