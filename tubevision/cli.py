"""The command line: a thin layer over the library.

``main(argv)`` parses the arguments, builds one frozen options object, calls
the library, hands results to :mod:`tubevision.record` and returns the exit
status: 0 done; 1 analysed, with a finding the user must see (no card found,
a control failed); 2 bad input or usage, with one line on stderr.
"""

from __future__ import annotations

import argparse
import json
import logging
import sys
from pathlib import Path

from . import __version__
from .errors import TubevisionInputError

__all__ = ["main"]

log = logging.getLogger("tubevision")

DEFAULT_OUT = "tubevision-out"
"""Output folder when ``--out`` is not given (our own choice)."""

SAFETY_NOTE = (
    "Safety: the wet tests this tool reads use toxic heavy-metal ions (lead, mercury, silver), "
    "chromate (Cr(VI), a carcinogen), strong acids and ammonia. Follow your local rules, the "
    "safety data sheets and licensed practice; the tool reads photos, it does not make the "
    "bench safe."
)


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as one line and exit status 2."""

    def error(self, message: str):  # noqa: D401 - argparse hook
        raise TubevisionInputError(f"usage: {message}")


def _build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="tubevision", description="Calibrated, quantified evidence per tube from a "
                "photo of a test-tube rack with the tubevision reference card in frame.")
    p.add_argument("--version", action="version", version=f"tubevision {__version__}")
    p.add_argument("-v", "--verbose", action="store_true", help="log diagnostics to stderr")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    a = sub.add_parser("analyze", help="analyse rack photos and write evidence records")
    a.add_argument("photos", nargs="+", metavar="PHOTO")
    a.add_argument("--out", default=DEFAULT_OUT, help=f"output folder (default: {DEFAULT_OUT})")
    a.add_argument("--json", action="store_true", help="with one photo: print the record, write nothing")
    a.add_argument("--card-ref", metavar="FILE", help="measured card values, CGATS.17 text (D50)")
    a.add_argument("--no-card", action="store_true", help="run uncalibrated on purpose")
    a.add_argument("--layout", metavar="FILE", help='tube boxes as JSON {"tubes": [{"bbox": [...]}]}')
    a.add_argument("--tubes", type=int, metavar="N", help="how many tubes to expect")
    a.add_argument("--scheme", metavar="NAME_OR_FILE", help="test scheme (built-in name or file)")
    a.add_argument("--step", help="the scheme step this photo shows")
    a.add_argument("--labels", help='tube labels by position, e.g. "1=control,2=unknown A,3=blank"')
    a.add_argument("--model", metavar="FILE", help="state classifier parameters (JSON) to use")
    a.add_argument("--turbidity-curve", metavar="FILE",
                   help="also report turbidity in a standards' unit (a curve from 'tubevision standards')")
    a.add_argument("--overwrite", action="store_true", help="replace an existing output folder")

    t = sub.add_parser("standards", help="fit a turbidity curve to a photo of standards (McFarland, NTU)")
    t.add_argument("photo", metavar="PHOTO")
    t.add_argument("--values", required=True, help='known value by tube position, e.g. "1=0,2=0.5,3=1,4=2"')
    t.add_argument("--unit", required=True, help="unit of the values, e.g. McFarland or NTU")
    t.add_argument("--out", required=True, metavar="CURVE.json", help="where to write the curve")
    t.add_argument("--card-ref", metavar="FILE", help="measured card values, CGATS.17 text (D50)")
    t.add_argument("--no-card", action="store_true", help="run uncalibrated on purpose")
    t.add_argument("--layout", metavar="FILE", help='tube boxes as JSON {"tubes": [{"bbox": [...]}]}')
    t.add_argument("--tubes", type=int, metavar="N", help="how many tubes to expect")
    t.add_argument("--overwrite", action="store_true", help="replace an existing curve file")

    c = sub.add_parser("conclude", help="combine step records into calls per sample")
    c.add_argument("records", nargs="+", metavar="RECORD.json")
    c.add_argument("--json", action="store_true", help="print the conclusion as JSON")
    c.add_argument("--report", metavar="FILE", help="also write a session report (HTML) there")

    v = sub.add_parser("verify", help="check an archive or output folder against its recorded hashes")
    v.add_argument("path", metavar="PATH", help="an archive (.zip), output folder or record.json")

    r = sub.add_parser("archive", help="pack output folders and photos as an RO-Crate 1.1 zip")
    r.add_argument("zip", metavar="OUT.zip")
    r.add_argument("inputs", nargs="+", metavar="DIR_OR_FILE")
    r.add_argument("--overwrite", action="store_true", help="replace an existing archive")

    k = sub.add_parser("card", help="write the printable reference card and its nominal values")
    k.add_argument("--out", required=True, metavar="FILE", help="card.png or card.pdf")
    k.add_argument("--dpi", type=int, default=300, help="resolution (default 300)")
    k.add_argument("--overwrite", action="store_true", help="replace existing files")

    b = sub.add_parser("backdrop", help="write the printable banded backdrop that turbidity reads best against")
    b.add_argument("--out", required=True, metavar="FILE", help="backdrop.png or backdrop.pdf")
    b.add_argument("--size", default="A4", metavar="SIZE",
                   help="A4, A3, A4-landscape, A3-landscape or WIDTHxHEIGHT in mm (default A4)")
    b.add_argument("--dpi", type=int, default=300, help="resolution (default 300)")
    b.add_argument("--overwrite", action="store_true", help="replace an existing file")

    s = sub.add_parser("schemes", help="list the built-in test schemes and their steps")
    s.add_argument("name", nargs="?", metavar="NAME_OR_FILE", help="show one scheme's steps and notes")

    sub.add_parser("train", add_help=False, help="build training data, retrain and evaluate the state "
                   "classifier (tubevision train --help)").add_argument("rest", nargs=argparse.REMAINDER)

    d = sub.add_parser("demo", help="render a sample photo of an invented scenario and analyse it")
    d.add_argument("--out", default="tubevision-demo", help="output folder (default: tubevision-demo)")
    d.add_argument("--overwrite", action="store_true", help="replace an existing demo folder")
    return p


def _existing_file(path: str | None, what: str) -> str | None:
    if path is None:
        return None
    p = Path(path)
    if not p.exists():
        raise TubevisionInputError(f"{what} {path}: no such file")
    if not p.is_file():
        raise TubevisionInputError(f"{what} {path}: not a file")
    return str(p)


def _options(args, argv) -> "object":
    from .analysis import AnalysisOptions
    from .tubes import parse_layout

    if args.no_card and args.card_ref:
        raise TubevisionInputError("--no-card and --card-ref exclude each other")
    if getattr(args, "json", False) and len(args.photos) != 1:
        raise TubevisionInputError("--json takes exactly one photo")
    if args.tubes is not None and not 1 <= args.tubes <= 48:
        raise TubevisionInputError(f"--tubes: expected 1 to 48, got {args.tubes}")
    layout_file = _existing_file(args.layout, "--layout")
    boxes = None
    if layout_file:
        try:
            text = Path(layout_file).read_text("utf-8")
        except UnicodeDecodeError:
            raise TubevisionInputError(f"--layout {layout_file}: not UTF-8 text") from None
        boxes = tuple(parse_layout(text, where=f"--layout {layout_file}"))
    scheme = getattr(args, "scheme", None)
    if scheme and (Path(scheme).suffix or "/" in scheme):
        _existing_file(scheme, "--scheme")
    return AnalysisOptions(
        card_ref=_existing_file(args.card_ref, "--card-ref"), no_card=args.no_card,
        layout_boxes=boxes, layout_file=layout_file, expected_tubes=args.tubes,
        scheme=scheme, step=getattr(args, "step", None), labels=getattr(args, "labels", None),
        model=_existing_file(getattr(args, "model", None), "--model"),
        turbidity_curve=_existing_file(getattr(args, "turbidity_curve", None), "--turbidity-curve"),
        command=tuple(["tubevision"] + list(argv)),
    )


def _check_photo_path(photo_path: str) -> None:
    p = Path(photo_path)
    if not p.exists():
        raise TubevisionInputError(f"{photo_path}: no such file")
    if p.is_dir():
        raise TubevisionInputError(f"{photo_path}: is a folder, not a photo")


def _cmd_analyze(args, argv) -> int:
    from .analysis import analyze_photo, load_shared
    from .image import load_photo
    from .record.folder import write_photo_outputs

    options = _options(args, argv)
    for photo_path in args.photos:  # fail fast on paths before any work
        _check_photo_path(photo_path)
    shared = load_shared(options)
    status = 0
    for photo_path in args.photos:
        photo = load_photo(photo_path)
        analysis = analyze_photo(photo, options, **shared)
        if args.json:
            from .record.build import build_record, to_json

            sys.stdout.write(to_json(build_record(analysis)))
        else:
            folder = write_photo_outputs(Path(args.out), Path(photo_path), analysis,
                                                 overwrite=args.overwrite)
            log.info("%s: wrote %s", photo_path, folder)
            print(f"{photo_path}: {len(analysis.finding.regions)} tubes, calibration "
                  f"{analysis.calibration_status} -> {folder}", file=sys.stderr)
        for w in analysis.warnings:
            print(f"{photo.meta.file}: warning: {w}", file=sys.stderr)
        status = max(status, analysis.exit_status)
    return status


def _cmd_standards(args, argv) -> int:
    from .analysis import analyze_photo, fit_standards_from_photo, parse_standard_values
    from .image import load_photo
    from .record.write import atomic_write_text
    from .turbidity import curve_to_json

    values = parse_standard_values(args.values)
    out = Path(args.out)
    if out.exists() and not args.overwrite:
        raise TubevisionInputError(f"{out}: already exists; pass --overwrite to replace it")
    options = _options(args, argv)
    _check_photo_path(args.photo)
    analysis = analyze_photo(load_photo(args.photo), options)
    curve, rows = fit_standards_from_photo(analysis, values, unit=args.unit)
    atomic_write_text(out, curve_to_json(curve) + "\n", overwrite=args.overwrite)
    print(f"{'tube':<5} {'turbidity':>10} {args.unit:>12} {'curve':>10}")
    for tid, tau, val in rows:
        print(f"{tid:<5} {tau:10.4f} {val:12.4g} {float(curve(tau)):10.4g}")
    lo, hi = curve.reading_range
    print(f"valid for turbidity {lo:.4g} to {hi:.4g}; wrote {out}", file=sys.stderr)
    for w in analysis.warnings:
        print(f"{analysis.photo.meta.file}: warning: {w}", file=sys.stderr)
    return analysis.exit_status


def _cmd_conclude(args) -> int:
    from .record.build import validate_record
    from . import scheme as scheme_mod

    records = []
    for path in args.records:
        _existing_file(path, "record")
        try:
            rec = json.loads(Path(path).read_text("utf-8"))
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise TubevisionInputError(f"{path}: not a JSON record ({exc})") from None
        validate_record(rec, where=path)
        records.append(rec)
    conclusion = scheme_mod.conclude(records)
    if args.json:
        sys.stdout.write(json.dumps(conclusion, indent=2, ensure_ascii=False, allow_nan=False) + "\n")
    else:
        sys.stdout.write(scheme_mod.conclusion_text(conclusion) if hasattr(scheme_mod, "conclusion_text")
                         else json.dumps(conclusion, indent=2, ensure_ascii=False) + "\n")
    if args.report:
        from .record.session import write_session_report

        write_session_report(args.report, records, conclusion)
        print(f"wrote {args.report}", file=sys.stderr)
    failed = any(not c.get("passed", True) for c in conclusion.get("controls", {}).values())
    return 1 if failed else 0


def _cmd_verify(args) -> int:
    from .record.verify import verify

    result = verify(args.path)
    for line in result.lines():
        print(line)
    return result.exit_status


def _cmd_archive(args) -> int:
    from .record.crate import archive_inputs, write_crate

    if not args.zip.endswith(".zip"):
        raise TubevisionInputError(f"archive: {args.zip}: the archive's name must end in .zip")
    for item in args.inputs:
        if not Path(item).exists():
            raise TubevisionInputError(f"archive: {item}: no such file or folder")
    files, base = archive_inputs(args.inputs, exclude=args.zip)
    write_crate(args.zip, files, base=base, overwrite=args.overwrite)
    print(f"wrote {args.zip} ({len(files)} files)", file=sys.stderr)
    return 0


def _cmd_card(args) -> int:
    from .card.printing import write_card

    if not 72 <= args.dpi <= 2400:
        raise TubevisionInputError(f"--dpi: expected 72 to 2400, got {args.dpi}")
    written = write_card(args.out, dpi=args.dpi, overwrite=args.overwrite)
    for path in written if isinstance(written, (list, tuple)) else [written]:
        print(f"wrote {path}", file=sys.stderr)
    print("Print at 100 % (no scaling, no 'fit to page') on matte paper; keep the card clean and dry.",
          file=sys.stderr)
    return 0


PAPER_MM = {"A4": (210.0, 297.0), "A3": (297.0, 420.0)}
"""ISO 216 paper sizes (mm), portrait."""


def _paper_size(text: str) -> tuple[float, float]:
    key = text.strip()
    base = key.upper().removesuffix("-LANDSCAPE")
    if base in PAPER_MM:
        w, h = PAPER_MM[base]
        return (h, w) if key.upper().endswith("-LANDSCAPE") else (w, h)
    parts = key.lower().split("x")
    try:
        w, h = (float(v) for v in parts)
    except ValueError:
        raise TubevisionInputError(f"--size {text!r}: expected A4, A3, A4-landscape, A3-landscape "
                                   "or WIDTHxHEIGHT in mm, e.g. 250x180") from None
    if not (20 <= w <= 1500 and 20 <= h <= 1500):
        raise TubevisionInputError(f"--size {text!r}: each side must be 20 to 1500 mm")
    return w, h


def _cmd_backdrop(args) -> int:
    from .backdrop import BAND_WIDTH_MM, write_backdrop

    if not 72 <= args.dpi <= 1200:
        raise TubevisionInputError(f"--dpi: expected 72 to 1200, got {args.dpi}")
    w_mm, h_mm = _paper_size(args.size)
    out = write_backdrop(args.out, w_mm, h_mm, args.dpi, overwrite=args.overwrite)
    print(f"wrote {out} ({w_mm:g} x {h_mm:g} mm, bands {BAND_WIDTH_MM:g} mm)", file=sys.stderr)
    print("Print at 100 % (no scaling) on matte paper; set it up behind the rack with the bands "
          "horizontal.", file=sys.stderr)
    return 0


def _cmd_schemes(args) -> int:
    from . import scheme as scheme_mod

    names = [args.name] if args.name else list(scheme_mod.builtin_schemes())
    for name in names:
        sch = scheme_mod.load_scheme(name)
        print(f"{sch.name}: {sch.title}")
        print(f"  analytes: {', '.join(sch.analytes)}")
        print(f"  steps: {', '.join(scheme_mod.step_names(sch))}")
        if args.name and sch.notes:
            print()
            print(sch.notes.strip())
    return 0


def _cmd_train(args) -> int:
    from .classify.train import main as train_main

    return int(train_main(list(args.rest)) or 0)


def _cmd_demo(args) -> int:
    from .demo import run_demo

    print(SAFETY_NOTE, file=sys.stderr)
    summary = run_demo(Path(args.out), overwrite=args.overwrite)
    sys.stdout.write(summary)
    return 0


_COMMANDS = {
    "analyze": _cmd_analyze,
    "standards": _cmd_standards,
    "conclude": lambda args, argv: _cmd_conclude(args),
    "card": lambda args, argv: _cmd_card(args),
    "demo": lambda args, argv: _cmd_demo(args),
    "verify": lambda args, argv: _cmd_verify(args),
    "archive": lambda args, argv: _cmd_archive(args),
    "backdrop": lambda args, argv: _cmd_backdrop(args),
    "schemes": lambda args, argv: _cmd_schemes(args),
    "train": lambda args, argv: _cmd_train(args),
}
"""Command name → handler(args, argv). ``tubevision train …`` is also handed over before
parsing, so that its own parser (tubevision.classify.train) sees every option."""


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit status (0, 1 or 2)."""
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = _build_parser()
    try:
        if argv[:1] == ["train"]:  # its own parser (tubevision.classify.train) takes every option
            return _cmd_train(argparse.Namespace(rest=argv[1:]))
        args = parser.parse_args(argv)
        logging.basicConfig(level=logging.DEBUG if args.verbose else logging.WARNING,
                            format="%(name)s: %(message)s", stream=sys.stderr)
        if args.command is None:
            parser.print_help(sys.stderr)
            return 2
        handler = _COMMANDS.get(args.command)
        if handler is not None:
            return handler(args, argv)
        raise TubevisionInputError(f"unknown command {args.command}")  # pragma: no cover
    except TubevisionInputError as exc:
        print(f"tubevision: error: {exc}", file=sys.stderr)
        return 2
    except SystemExit as exc:  # --help / --version
        return int(exc.code or 0)
    except KeyboardInterrupt:
        print("tubevision: interrupted", file=sys.stderr)
        return 130
