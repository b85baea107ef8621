"""Stage 2, card: the reference card, finding it in a photo, and the colour correction.

* ``design``    — the card's geometry and nominal colours; ``render_card``.
* ``reference`` — CGATS.17 reference values (nominal or measured with ``--card-ref``).
* ``detect``    — markers → homography → patch samples and mm scale.
* ``fit``       — matrix and root-polynomial corrections chosen by leave-one-out ΔE00.
* ``printing``  — the printable PNG/PDF at true size.
"""

from .design import CARD_ID, CARD_VERSION, card_layout, render_card
from .detect import CardDetection, CardNotFound, find_card
from .fit import CardCorrection, apply_card_correction, fit_card_correction, uncalibrated_correction
from .reference import CardReference, load_card_reference, parse_cgats

__all__ = ["CARD_ID", "CARD_VERSION", "card_layout", "render_card", "CardDetection", "CardNotFound",
           "find_card", "CardCorrection", "apply_card_correction", "fit_card_correction",
           "uncalibrated_correction", "CardReference", "load_card_reference", "parse_cgats"]
