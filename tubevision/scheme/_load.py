"""Reading scheme files: TOML → JSON Schema check → frozen dataclasses.

Every piece of chemistry lives in the scheme files
(``tubevision/data/schemes/*.toml``); this module only knows the shape those
files take, which ``tubevision/data/scheme.schema.json`` describes. A fault
in a file is reported as a :class:`~tubevision.errors.TubevisionInputError`
naming the file and the line.
"""

from __future__ import annotations

import hashlib
import json
import re
import tomllib
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any

from ..errors import TubevisionInputError

SCHEME_FORMAT = "tubevision.scheme/1"
"""Value of the ``format`` key every scheme file carries."""

ROLES = ("sample", "control", "blank", "standard")
"""Roles a labelled tube can have (the contract names control and blank)."""

DEFAULT_ROLE_WORDS: dict[str, tuple[str, ...]] = {"control": ("control",), "blank": ("blank",)}
"""A label containing one of these words has that role unless the scheme's
``[roles]`` table says otherwise (contract: "a label that contains `control`
or `blank` marks the tube's role")."""

DEFAULT_MIN_CONFIDENCE = 0.5
"""Below this state confidence (0–1) a tube is inconclusive. Reason: the
classifier's confidence is a probability-like score; under one half, the
other states are together more likely than the one named."""

DEFAULT_BETWEEN_BAND = (0.3, 0.7)
"""Where a tube lies between the blank (0) and the positive control (1), a
position inside this band is "between control and blank": inconclusive.
Reason: the middle 40 % leaves each side a margin of a fifth of the
control–blank distance; common practice in comparing with controls is to
refuse a call that is not clearly nearer one of them."""


@dataclass(frozen=True)
class Condition:
    """An appearance, as a scheme file gives it; every key that is set must hold.

    Attributes are the keys of the schema's ``condition`` (see
    ``scheme.schema.json``); None or an empty tuple means "not required".
    """

    states: tuple[str, ...] = ()
    pellet: str = "any"
    pellet_colours: tuple[str, ...] = ()
    liquid_colours: tuple[str, ...] = ()
    min_pellet_height_mm: float | None = None
    min_pellet_lightness: float | None = None
    max_pellet_lightness: float | None = None
    min_turbidity_above_blank: float | None = None
    max_turbidity_above_blank: float | None = None
    min_liquid_de00_to_blank: float | None = None
    max_liquid_de00_to_blank: float | None = None
    max_liquid_de00_to_control: float | None = None
    min_turbidity_ratio_to_standard: float | None = None
    max_turbidity_ratio_to_standard: float | None = None
    any_of: tuple["Condition", ...] = ()


@dataclass(frozen=True)
class Outcome:
    """An expected appearance with its meaning in words."""

    meaning: str
    condition: Condition


@dataclass(frozen=True)
class Diagnostic:
    """A known trouble sign: when ``when`` holds for a tube of a role in ``applies_to``."""

    applies_to: tuple[str, ...]
    when: Condition
    finding: str
    likely_cause: str

    @property
    def text(self) -> str:
        return f"{self.finding}: likely cause {self.likely_cause}"


@dataclass(frozen=True)
class Step:
    """One step of a scheme: the reagent, the fraction photographed and what to expect."""

    name: str
    title: str
    reagent: str
    fraction: str
    source: str
    hazards: tuple[str, ...]
    positive: Outcome
    negative: Outcome
    standard: Outcome | None = None
    reactions: tuple[str, ...] = ()
    notes: str = ""
    procedure: str = ""
    requires: tuple[tuple[str, str], ...] = ()
    compare: str | None = None
    needs: tuple[str, ...] = ()
    diagnostics: tuple[Diagnostic, ...] = ()


@dataclass(frozen=True)
class CallRule:
    """If every ``(step, verdict)`` in ``when`` holds, the analyte is ``call``."""

    when: tuple[tuple[str, str], ...]
    call: str
    reason: str


@dataclass(frozen=True)
class AnalyteCalls:
    """The rules that decide one analyte."""

    analyte: str
    rules: tuple[CallRule, ...]

    @property
    def steps(self) -> tuple[str, ...]:
        """The steps any rule looks at, in first-use order."""
        return tuple(dict.fromkeys(s for r in self.rules for s, _ in r.when))


@dataclass(frozen=True)
class Scheme:
    """A loaded test scheme.

    ``origin`` is what the user named (a built-in name or a path) so that a
    later ``conclude`` can load the same file; ``sha256`` is of its bytes.
    """

    name: str
    title: str
    analytes: tuple[str, ...]
    source: str
    steps: tuple[Step, ...]
    calls: tuple[AnalyteCalls, ...]
    role_words: tuple[tuple[str, tuple[str, ...]], ...]
    min_confidence: float
    between_band: tuple[float, float]
    diagnostics: tuple[Diagnostic, ...]
    origin: str
    file: str
    sha256: str
    notes: str = ""
    safety: str = ""

    def step(self, name: str) -> Step:
        """The step called ``name``.

        Raises
        ------
        TubevisionInputError
            No such step; the message lists the scheme's steps.
        """
        for s in self.steps:
            if s.name == name:
                return s
        raise TubevisionInputError(f"--step: scheme {self.name} has no step {name!r} "
                                   f"(one of: {', '.join(step_names(self))})")


def step_names(scheme: Scheme) -> tuple[str, ...]:
    """The scheme's step names in order."""
    return tuple(s.name for s in scheme.steps)


def check_step(scheme: Scheme, step: str) -> Step:
    """Raise :class:`TubevisionInputError` unless ``step`` is one of the scheme's steps."""
    return scheme.step(step)


def builtin_schemes() -> tuple[str, ...]:
    """Names of the schemes shipped in ``tubevision/data/schemes``."""
    folder = resources.files("tubevision").joinpath("data", "schemes")
    return tuple(sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".toml")))


@lru_cache(maxsize=1)
def _validator():
    import jsonschema

    text = resources.files("tubevision").joinpath("data", "scheme.schema.json").read_text("utf-8")
    return jsonschema.Draft202012Validator(json.loads(text))


def _looks_like_path(name: str) -> bool:
    return "/" in name or "\\" in name or Path(name).suffix != ""


def load_scheme(name_or_path: str | Path) -> Scheme:
    """Load a built-in scheme by name, or a scheme file by path.

    Parameters
    ----------
    name_or_path : str or Path
        A built-in name (``group1``, see :func:`builtin_schemes`) or the
        path of a TOML scheme file.

    Returns
    -------
    Scheme

    Raises
    ------
    TubevisionInputError
        Unknown name, unreadable file, TOML syntax error (with its line), a
        schema violation (with the line of the offending key as near as it
        can be found) or an inconsistent scheme (unknown step in a rule…).
    """
    origin = str(name_or_path)
    if isinstance(name_or_path, Path) or _looks_like_path(origin):
        path = Path(origin)
        if not path.is_file():
            raise TubevisionInputError(f"--scheme: file {origin} not found")
        try:
            data = path.read_bytes()
        except OSError as exc:
            raise TubevisionInputError(f"--scheme: cannot read {origin} ({exc.strerror})") from None
        where = origin
    else:
        names = builtin_schemes()
        if origin not in names:
            raise TubevisionInputError(f"--scheme: no built-in scheme {origin!r} (built-in: {', '.join(names)}; "
                                       "or give a .toml file)")
        data = resources.files("tubevision").joinpath("data", "schemes", origin + ".toml").read_bytes()
        where = f"{origin}.toml"
    return parse_scheme(data, where=where, origin=origin)


def parse_scheme(data: bytes | str, *, where: str = "<scheme>", origin: str | None = None) -> Scheme:
    """Parse and check the text of a scheme file (see :func:`load_scheme`).

    Results are cached by content (the JSON Schema check is the slow part),
    so that a batch of photos or records parses each scheme once.
    """
    raw_bytes = data.encode("utf-8") if isinstance(data, str) else data
    return _parse_cached(raw_bytes, where, origin)


@lru_cache(maxsize=32)
def _parse_cached(raw_bytes: bytes, where: str, origin: str | None) -> Scheme:
    try:
        text = raw_bytes.decode("utf-8")
    except UnicodeDecodeError:
        raise TubevisionInputError(f"scheme file {where}: not UTF-8 text") from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        # Python 3.11's TOMLDecodeError has no lineno attribute; its message
        # ends "(at line L, column C)".
        msg = str(exc)
        m = re.search(r"\s*\(at line (\d+), column (\d+)\)\s*$", msg)
        line = getattr(exc, "lineno", None) or (int(m.group(1)) if m else None)
        if m:
            msg = msg[:m.start()] + f" (column {m.group(2)})"
        at = f" line {line}" if line else ""
        raise TubevisionInputError(f"scheme file {where}{at}: TOML syntax error: {msg}") from None
    errors = sorted(_validator().iter_errors(doc), key=lambda e: (len(list(e.absolute_path)), str(e.message)))
    if errors:
        e = _most_specific(errors)
        path = list(e.absolute_path)
        line = _line_of(text, path)
        key = _path_text(path) or "(top level)"
        raise TubevisionInputError(f"scheme file {where} line {line}: {key}: {_short(e)}")
    scheme = _build(doc, where=where, origin=origin or where, text=text,
                    sha256=hashlib.sha256(raw_bytes).hexdigest())
    return scheme


def _most_specific(errors):
    """The deepest error, descending into oneOf/anyOf/allOf contexts."""
    best = max(errors, key=lambda e: len(list(e.absolute_path)))
    while best.context:
        deeper = max(best.context, key=lambda e: len(list(e.absolute_path)))
        if len(list(deeper.absolute_path)) < len(list(best.absolute_path)):
            break
        best = deeper
    return best


def _short(err) -> str:
    msg = err.message
    if err.validator == "enum":
        return f"{err.instance!r} is not one of {', '.join(map(str, err.validator_value))}"
    if err.validator in ("additionalProperties", "unevaluatedProperties"):
        return msg.replace("were unexpected", "is not a known key").replace("was unexpected", "is not a known key")
    return msg if len(msg) <= 160 else msg[:157] + "..."


def _path_text(path: list) -> str:
    out = ""
    for p in path:
        out += f"[{p}]" if isinstance(p, int) else (("." if out else "") + str(p))
    return out


def _line_of(text: str, path: list) -> int:
    """The 1-based line of the key at ``path`` in TOML ``text``, as near as can be found.

    A heuristic: walk the path, finding each key (as ``key =``, ``key.`` or a
    ``[table]`` header naming it) after the previous one; an index into an
    array of tables ``[[name]]`` skips to the index-th such header.
    """
    pos = 0
    prev_key: str | None = None
    for part in path:
        if isinstance(part, int):
            if prev_key is not None:
                headers = [m.start() for m in re.finditer(
                    r"^[ \t]*\[\[\s*(?:[\w.-]+\.)?" + re.escape(prev_key) + r"\s*\]\]", text, re.M)]
                after = [h for h in headers if h >= pos]
                if part < len(after):
                    pos = after[part]
                    continue
                # An inline array: step over `part` commas as a rough guess.
                for _ in range(part):
                    nxt = text.find(",", pos + 1)
                    if nxt < 0:
                        break
                    pos = nxt
            continue
        key = re.escape(str(part))
        pat = re.compile(r"(?:^|[\s{,.\[])\"?" + key + r"\"?\s*(?:=|\.|\])", re.M)
        m = pat.search(text, pos)
        if m:
            key_at = m.start() + (1 if text[m.start()] in " \t\n{,.[" else 0)
            line_start = text.rfind("\n", 0, key_at) + 1
            # A table header: count from the start of its line, so that the
            # header itself is the array's element 0.
            pos = line_start if text[line_start:key_at].lstrip().startswith("[") else key_at
        prev_key = str(part)
    return text.count("\n", 0, pos) + 1


def _cond(d: dict) -> Condition:
    return Condition(
        states=tuple(d.get("states", ())),
        pellet=d.get("pellet", "any"),
        pellet_colours=tuple(d.get("pellet_colours", ())),
        liquid_colours=tuple(d.get("liquid_colours", ())),
        min_pellet_height_mm=d.get("min_pellet_height_mm"),
        min_pellet_lightness=d.get("min_pellet_lightness"),
        max_pellet_lightness=d.get("max_pellet_lightness"),
        min_turbidity_above_blank=d.get("min_turbidity_above_blank"),
        max_turbidity_above_blank=d.get("max_turbidity_above_blank"),
        min_liquid_de00_to_blank=d.get("min_liquid_de00_to_blank"),
        max_liquid_de00_to_blank=d.get("max_liquid_de00_to_blank"),
        max_liquid_de00_to_control=d.get("max_liquid_de00_to_control"),
        min_turbidity_ratio_to_standard=d.get("min_turbidity_ratio_to_standard"),
        max_turbidity_ratio_to_standard=d.get("max_turbidity_ratio_to_standard"),
        any_of=tuple(_cond(c) for c in d.get("any_of", ())),
    )


def _outcome(d: dict) -> Outcome:
    return Outcome(meaning=d["meaning"], condition=_cond(d))


def _diag(d: dict) -> Diagnostic:
    return Diagnostic(applies_to=tuple(d["applies_to"]), when=_cond(d["when"]),
                      finding=d["finding"], likely_cause=d["likely_cause"])


def _build(doc: dict, *, where: str, origin: str, text: str, sha256: str) -> Scheme:
    head = doc["scheme"]
    analytes = tuple(head["analytes"])

    def fail(path: list, what: str):
        raise TubevisionInputError(f"scheme file {where} line {_line_of(text, path)}: {_path_text(path)}: {what}")

    steps: list[Step] = []
    seen: dict[str, int] = {}
    for i, s in enumerate(doc["steps"]):
        if s["name"] in seen:
            fail(["steps", i, "name"], f"step {s['name']!r} given twice")
        for dep in s.get("requires", {}):
            if dep not in seen:
                fail(["steps", i, "requires", dep], f"requires {dep!r}, which is not an earlier step")
        seen[s["name"]] = i
        for role in s.get("needs", ()):
            if role == "standard" and "standard" not in doc.get("roles", {}):
                fail(["steps", i, "needs"], "needs a standard but the scheme's [roles] gives no standard words")
        steps.append(Step(
            name=s["name"], title=s.get("title", s["name"]), reagent=s["reagent"], fraction=s["fraction"],
            source=s["source"], hazards=tuple(s["hazards"]), positive=_outcome(s["positive"]),
            negative=_outcome(s["negative"]),
            standard=_outcome(s["standard"]) if "standard" in s else None,
            reactions=tuple(s.get("reactions", ())), notes=s.get("notes", ""), procedure=s.get("procedure", ""),
            requires=tuple(s.get("requires", {}).items()), compare=s.get("compare"),
            needs=tuple(s.get("needs", ())), diagnostics=tuple(_diag(d) for d in s.get("diagnostics", ())),
        ))
    calls: list[AnalyteCalls] = []
    decided: set[str] = set()
    for i, c in enumerate(doc["calls"]):
        if c["analyte"] not in analytes:
            fail(["calls", i, "analyte"], f"{c['analyte']!r} is not one of the scheme's analytes")
        if c["analyte"] in decided:
            fail(["calls", i, "analyte"], f"{c['analyte']!r} has two [[calls]] tables")
        decided.add(c["analyte"])
        rules = []
        for j, r in enumerate(c["rules"]):
            for st in r["when"]:
                if st not in seen:
                    fail(["calls", i, "rules", j, "when", st], f"unknown step {st!r}")
            rules.append(CallRule(when=tuple(r["when"].items()), call=r["call"], reason=r["reason"]))
        calls.append(AnalyteCalls(analyte=c["analyte"], rules=tuple(rules)))
    missing = [a for a in analytes if a not in decided]
    if missing:
        fail(["calls"], f"no rules decide {', '.join(missing)}")

    roles = dict(DEFAULT_ROLE_WORDS)
    for role, words in doc.get("roles", {}).items():
        roles[role] = tuple(w.lower() for w in words)
    judging = doc.get("judging", {})
    band = tuple(judging.get("between_band", DEFAULT_BETWEEN_BAND))
    if not band[0] <= band[1]:
        fail(["judging", "between_band"], "the lower end must not exceed the upper end")
    return Scheme(
        name=head["name"], title=head["title"], analytes=analytes, source=head["source"],
        steps=tuple(steps), calls=tuple(calls), role_words=tuple(roles.items()),
        min_confidence=float(judging.get("min_confidence", DEFAULT_MIN_CONFIDENCE)),
        between_band=(float(band[0]), float(band[1])),
        diagnostics=tuple(_diag(d) for d in doc.get("diagnostics", ())),
        origin=origin, file=where, sha256=sha256, notes=head.get("notes", ""),
        safety=head.get("safety", ""),
    )


def role_of(scheme: Scheme, label: str | None) -> str | None:
    """The role a label gives its tube: the role of the longest role word it contains.

    Case is ignored. An unlabelled tube (None or blank text) has no role and
    is ignored; any other label makes a sample.

    >>> s = load_scheme("group1")
    >>> role_of(s, "Control"), role_of(s, "negative control"), role_of(s, "unknown A"), role_of(s, None)
    ('control', 'blank', 'sample', None)
    """
    if label is None or not label.strip():
        return None
    low = label.lower()
    best: tuple[int, str] | None = None
    for role, words in scheme.role_words:
        for w in words:
            if w in low and (best is None or len(w) > best[0]):
                best = (len(w), role)
    return best[1] if best else "sample"


def parse_labels(text: str | None, n_tubes: int) -> dict[int, str]:
    """Parse ``--labels`` text: ``"1=control,2=unknown A,3=blank"``.

    Parameters
    ----------
    text : str or None
        Comma-separated ``position=label`` items; positions count from 1 in
        reading order. Empty or None gives no labels.
    n_tubes : int
        Number of tubes found in the photo.

    Returns
    -------
    dict mapping position (1-based) to label (stripped).

    Raises
    ------
    TubevisionInputError
        Bad syntax, a position out of range, or a position given twice.

    Examples
    --------
    >>> parse_labels("1=control, 2=unknown A,3=blank", 3)
    {1: 'control', 2: 'unknown A', 3: 'blank'}
    """
    out: dict[int, str] = {}
    if text is None or not text.strip():
        return out
    for item in text.split(","):
        item = item.strip()
        if not item:
            raise TubevisionInputError("--labels: empty item (two commas in a row?); "
                                       "write e.g. \"1=control,2=unknown A,3=blank\"")
        pos_text, eq, label = item.partition("=")
        pos_text, label = pos_text.strip(), label.strip()
        if not eq or not pos_text.isdigit():
            raise TubevisionInputError(f"--labels: {item!r} is not POSITION=LABEL "
                                       "(e.g. \"1=control,2=unknown A,3=blank\")")
        if not label:
            raise TubevisionInputError(f"--labels: position {pos_text} has an empty label")
        pos = int(pos_text)
        if pos < 1:
            raise TubevisionInputError(f"--labels: positions count from 1, got {pos}")
        if pos > n_tubes:
            raise TubevisionInputError(f"--labels: position {pos} given but only {n_tubes} tube"
                                       f"{'' if n_tubes == 1 else 's'} found")
        if pos in out:
            raise TubevisionInputError(f"--labels: position {pos} given twice ({out[pos]!r} and {label!r})")
        out[pos] = label
    return out


def scheme_summary(scheme: Scheme) -> dict[str, Any]:
    """Name, file and sha256 of a scheme, for provenance."""
    return {"name": scheme.name, "source": scheme.origin, "file": scheme.file, "sha256": scheme.sha256}
