"""Compose the stages: load → card → tubes → measure → classify → scheme → record.

:func:`analyze_photo` is the library's front door. It takes a decoded
:class:`~tubevision.image.Photo` and an :class:`AnalysisOptions` and returns a
:class:`PhotoAnalysis` holding each stage's result by name; turning that into
files is :mod:`tubevision.record`'s job.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import logging
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import TubevisionInputError
from .image import Photo

__all__ = ["AnalysisOptions", "PhotoAnalysis", "analyze_photo", "card_reference_for", "load_shared",
           "parse_standard_values", "fit_standards_from_photo"]

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class AnalysisOptions:
    """Everything the user chose for one analysis, as the CLI parsed it.

    ``layout_boxes`` are ``[x0, y0, x1, y1]`` boxes from ``--layout`` (or None
    to find tubes); ``labels`` is the raw ``--labels`` text.
    """

    card_ref: str | None = None
    no_card: bool = False
    layout_boxes: tuple[tuple[int, int, int, int], ...] | None = None
    layout_file: str | None = None
    expected_tubes: int | None = None
    scheme: str | None = None
    step: str | None = None
    labels: str | None = None
    model: str | None = None
    turbidity_curve: str | None = None
    command: tuple[str, ...] = ()


@dataclass(frozen=True)
class PhotoAnalysis:
    """The results of every stage for one photo, passed on by name."""

    photo: Photo
    options: AnalysisOptions
    calibration_status: str  # "card" or "none"
    card_detection: Any  # CardDetection | CardNotFound | None (--no-card)
    correction: Any  # CardCorrection (the uncalibrated one when status is "none")
    card_reference: Any  # CardReference or None
    finding: Any  # TubeFinding
    measurements: tuple  # TubeMeasurement per region
    calls: tuple  # TubeCall per region
    scheme: Any = None  # Scheme or None
    labels: dict[int, str] = field(default_factory=dict)
    judgement: Any = None  # StepJudgement or None
    warnings: tuple[str, ...] = ()
    ran_at: str = ""

    @property
    def exit_status(self) -> int:
        """1 when the user must see a finding (no card found, a control failed), else 0."""
        if self.calibration_status == "none" and not self.options.no_card:
            return 1
        if self.judgement is not None and getattr(self.judgement, "control_failures", ()):
            return 1
        return 0


def card_reference_for(options: AnalysisOptions):
    """The card reference values: measured (``--card-ref``) or the card's nominal ones."""
    from .card.reference import load_card_reference

    return load_card_reference(options.card_ref)


def load_shared(options: AnalysisOptions) -> dict:
    """Parse the data files a batch of photos shares (card reference, scheme, model) once.

    Raises
    ------
    TubevisionInputError
        A malformed card reference, scheme or model file.
    """
    from . import classify

    shared = {"card_reference": None, "scheme": None, "model": classify.load_model(options.model),
              "turbidity_curve": None}
    if options.turbidity_curve:
        from .turbidity import load_curve

        shared["turbidity_curve"] = load_curve(options.turbidity_curve)
    if not options.no_card:
        shared["card_reference"] = card_reference_for(options)
    if options.scheme:
        from . import scheme as scheme_mod

        shared["scheme"] = scheme_mod.load_scheme(options.scheme)
    return shared


def file_sha256(path: str | Path) -> str:
    """SHA-256 of a file's bytes, for provenance."""
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def analyze_photo(photo: Photo, options: AnalysisOptions = AnalysisOptions(), *,
                  card_reference=None, scheme=None, model=None, turbidity_curve=None) -> PhotoAnalysis:
    """Run every stage on one photo.

    Parameters
    ----------
    photo : the decoded photo (:func:`tubevision.image.load_photo`).
    options : the user's choices.
    card_reference, scheme, model, turbidity_curve : already-loaded objects, so that a
        batch of photos parses each data file once; loaded from ``options`` when None.

    Returns
    -------
    PhotoAnalysis

    Raises
    ------
    TubevisionInputError
        Bad options or data files (unknown scheme or step, labels that do not
        fit the tubes found, a malformed card reference or model file).
    """
    from .card import detect as card_detect
    from .card import fit as card_fit
    from . import classify, measure, tubes

    warnings: list[str] = list(photo.meta.warnings)
    ran_at = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()

    # Load the data files first, so that bad input fails before any work.
    if options.scheme:
        from . import scheme as scheme_mod

        if scheme is None:
            scheme = scheme_mod.load_scheme(options.scheme)
        if not options.step:
            raise TubevisionInputError("--scheme needs --step (one of: "
                                       + ", ".join(scheme_mod.step_names(scheme)) + ")")
        scheme_mod.check_step(scheme, options.step)
    elif options.step or options.labels:
        raise TubevisionInputError("--step and --labels need --scheme")
    if model is None:
        model = classify.load_model(options.model)
    if turbidity_curve is None and options.turbidity_curve:
        from .turbidity import load_curve

        turbidity_curve = load_curve(options.turbidity_curve)

    # card
    detection = None
    reference = None
    correction = card_fit.uncalibrated_correction()
    status = "none"
    if options.no_card:
        warnings.append("run without a card (--no-card): colours are uncalibrated and no mm scale is known")
    else:
        reference = card_reference if card_reference is not None else card_reference_for(options)
        detection = card_detect.find_card(photo.pixels)
        if detection:
            correction = card_fit.fit_card_correction(detection, reference)
            status = "card"
            warnings.extend(detection.warnings)
            warnings.extend(correction.warnings)
        else:
            warnings.append(f"no reference card found ({detection.reason}): colours are uncalibrated "
                            "and no mm scale is known")
    mm_per_px = detection.mm_per_px if status == "card" else None

    # tubes
    if options.layout_boxes is not None:
        finding = tubes.tubes_from_layout(photo.pixels, list(options.layout_boxes))
    else:
        quad = detection.corners_px if status == "card" else None
        finding = tubes.find_tubes(photo.pixels, expected=options.expected_tubes, exclude_quad=quad)
    warnings.extend(finding.warnings)

    # measure, classify
    def scale_at(region):
        # the card's homography gives the scale at each tube's own bottom, not just at the
        # card (perspective changes it across the frame; see measure.mm_per_px_at)
        if status != "card":
            return mm_per_px
        try:
            return measure.mm_per_px_at(detection.homography_mm_to_px, (region.axis_col, region.inner_bottom))
        except TubevisionInputError:
            return mm_per_px

    measurements = tuple(
        measure.measure_tube(photo.pixels, region, correction=correction, mm_per_px=scale_at(region),
                             turbidity_curve=turbidity_curve)
        for region in finding.regions
    )
    if hasattr(measure, "photo_quality"):
        warnings.extend(measure.photo_quality(photo.pixels, finding.regions))
    calls = tuple(classify.classify_tube(m, model=model) for m in measurements)

    # scheme
    labels: dict[int, str] = {}
    judgement = None
    if scheme is not None:
        from . import scheme as scheme_mod

        labels = scheme_mod.parse_labels(options.labels or "", len(finding.regions))
        observations = [scheme_mod.observation_from(m, c) for m, c in zip(measurements, calls)]
        judgement = scheme_mod.judge_step(scheme, options.step, observations, labels)
        warnings.extend(judgement.warnings)
    elif options.labels:
        labels = {}

    return PhotoAnalysis(
        photo=photo, options=options, calibration_status=status, card_detection=detection,
        correction=correction, card_reference=reference, finding=finding,
        measurements=measurements, calls=calls, scheme=scheme, labels=labels,
        judgement=judgement, warnings=tuple(dict.fromkeys(warnings)), ran_at=ran_at,
    )


def parse_standard_values(text: str) -> dict[int, float]:
    """``"1=0,2=0.5,3=1"`` → {0: 0.0, 1: 0.5, 2: 1.0}: tube positions (from 1, reading order)
    and the known values of the standards in them.

    Raises
    ------
    TubevisionInputError
        An item without ``=``, a position that is not a whole number ≥ 1, a value that is
        not a finite number, or a position given twice.

    Examples
    --------
    >>> parse_standard_values("1=0, 2=0.5,3=1")
    {0: 0.0, 1: 0.5, 2: 1.0}
    """
    import math

    out: dict[int, float] = {}
    for item in (text or "").split(","):
        item = item.strip()
        if not item:
            continue
        pos, sep, val = item.partition("=")
        try:
            k = int(pos.strip())
            v = float(val.strip())
        except ValueError:
            k, v = 0, float("nan")
        if not sep or k < 1 or not math.isfinite(v):
            raise TubevisionInputError(f"--values: {item!r}: expected POSITION=VALUE, e.g. 1=0.5")
        if k - 1 in out:
            raise TubevisionInputError(f"--values: position {k} given twice")
        out[k - 1] = v
    if not out:
        raise TubevisionInputError("--values: give each standard's position and value, e.g. \"1=0,2=0.5,3=1\"")
    return out


def fit_standards_from_photo(analysis: PhotoAnalysis, values: dict[int, float], *, unit: str):
    """Fit a turbidity curve to the standards photographed in ``analysis``.

    ``values`` maps tube index (reading order, from 0) to the standard's known value in
    ``unit``. Returns ``(curve, rows)`` with rows ``(tube id, τ, value)``.

    Raises
    ------
    TubevisionInputError
        A position with no tube, a standard read as empty, or too few standards
        (:func:`tubevision.turbidity.fit_turbidity_curve`).
    """
    from .turbidity import curve_from_measurements

    n = len(analysis.finding.regions)
    rows, ms = [], []
    for k in sorted(values):
        if k >= n:
            raise TubevisionInputError(f"--values: position {k + 1}, but {n} tubes were found")
        m = analysis.measurements[k]
        if m.liquid is None:
            raise TubevisionInputError(f"--values: tube T{k + 1} reads as empty; no turbidity to calibrate")
        rows.append((f"T{k + 1}", float(m.liquid.turbidity), float(values[k])))
        ms.append(m)
    source = (f"{len(rows)} standards in {analysis.photo.meta.file} "
              f"(sha256 {analysis.photo.meta.sha256[:12]}…), calibration {analysis.calibration_status}")
    curve = curve_from_measurements(ms, [r[2] for r in rows], unit=unit, source=source)
    return curve, rows
