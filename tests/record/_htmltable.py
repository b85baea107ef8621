"""Read the reports back with the standard library's HTML parser (test helper)."""

from __future__ import annotations

from html.parser import HTMLParser


class TubeTableReader(HTMLParser):
    """Collects, per ``<tr data-tube>`` of ``table#tubes``, the ``data-key`` spans' values.

    A span's value is its ``data-value`` attribute when present, else its text.
    """

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.rows: list[dict[str, str]] = []
        self._in_table = False
        self._row: dict[str, str] | None = None
        self._key: str | None = None
        self._text: list[str] = []
        self._depth = 0
        self.tags: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag == "table" and a.get("id") == "tubes":
            self._in_table = True
        if self._in_table and tag == "tr" and "data-tube" in a:
            self._row = {}
            self.rows.append(self._row)
        if self._row is not None and tag == "span" and "data-key" in a:
            if "data-value" in a:
                self._row[a["data-key"]] = a["data-value"] or ""
            else:
                self._key, self._text, self._depth = a["data-key"], [], 0
                return
        if self._key is not None and tag == "span":
            self._depth += 1

    def handle_endtag(self, tag):
        if tag == "table" and self._in_table:
            self._in_table = False
            self._row = None
        if tag == "span" and self._key is not None:
            if self._depth == 0:
                self._row[self._key] = "".join(self._text)
                self._key = None
            else:
                self._depth -= 1

    def handle_data(self, data):
        if self._key is not None:
            self._text.append(data)


def read_tube_table(html_text: str) -> TubeTableReader:
    r = TubeTableReader()
    r.feed(html_text)
    r.close()
    return r


class TextReader(HTMLParser):
    """Visible text of a page (script and style excluded) and all tags with attributes."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.parts: list[str] = []
        self.tags: list[tuple[str, dict]] = []
        self._skip = 0

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag in ("style", "script", "title"):
            self._skip += 1

    def handle_endtag(self, tag):
        if tag in ("style", "script", "title") and self._skip:
            self._skip -= 1

    def handle_data(self, data):
        if not self._skip:
            self.parts.append(data)

    @property
    def text(self) -> str:
        return " ".join(" ".join(self.parts).split())


def read_text(html_text: str) -> TextReader:
    r = TextReader()
    r.feed(html_text)
    r.close()
    return r
