"""The HTML builder: well-formed, self-contained, escaped, verdict first, hazards last."""

from __future__ import annotations

import base64
import io
from html.parser import HTMLParser

import pytest
from PIL import Image as PILImage
from report_testkit import budget

from upswing.errors import RequestError
from upswing.report.html import Document, Image, Notes, Paragraph, Section, Table, render
from upswing.report.verdict import Margin, Verdict
from upswing.safety import CAUTIONS, STANDARDS
from upswing.verification.hazards import HazardNote

VOID = {"meta", "link", "img", "br", "hr", "input", "source", "col", "wbr", "area", "base", "embed", "track"}
EVIL = '<script>alert("x")</script> & "quoted" <img src=http://example.invalid/x.png onerror=alert(1)>'


class Page(HTMLParser):
    """Reads a page with Python's own HTML parser (the independent reference) and checks nesting as it goes."""

    def __init__(self, text: str) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.text: list[str] = []
        self.errors: list[str] = []
        self.feed(text)
        self.close()
        if self.stack:
            self.errors.append(f"unclosed: {self.stack}")

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
        else:
            self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)

    def all_text(self) -> str:
        return "".join(self.text)


def png(width: int = 8, height: int = 6) -> bytes:
    buffer = io.BytesIO()
    PILImage.new("RGB", (width, height), (30, 33, 38)).save(buffer, format="PNG")
    return buffer.getvalue()


def document(verdict: Verdict | None = None, text: str = "plain") -> Document:
    return Document(
        title=f"Rig {text}", kind="test report", facts=(("rig file", text),),
        verdict=verdict or Verdict("incomplete", f"headline {text}"),
        sections=(Section(f"First {text}", (Paragraph(text), Notes((text, "second item")),
                                           Table(("quantity", "value [m]"), ((text, "0.25"), ("b", "-"))),
                                           Image(png(), "image/png", f"caption {text}"))),
                  Section("Second", (Image(png(4, 4), "image/png", "another"),))),
        hazards=(HazardNote(f"hazard {text}", f"detail {text}", ("ISO 13850", "local rule 7")),))


def test_page_is_well_formed_and_self_contained():
    page = Page(render(document()))
    assert page.errors == []
    names = [t for t, _ in page.tags]
    assert "script" not in names
    for tag, attrs in page.tags:
        for key in ("src", "href", "action", "data", "poster"):
            value = attrs.get(key)
            if value is not None:
                assert value.startswith(("data:", "#")), f"<{tag} {key}={value[:40]!r}> leaves the file"
    policy = [a["content"] for t, a in page.tags if t == "meta" and a.get("http-equiv") == "Content-Security-Policy"]
    assert policy and "default-src 'none'" in policy[0]


def test_every_text_field_is_escaped():
    page = Page(render(document(text=EVIL)))
    assert page.errors == []
    names = [t for t, _ in page.tags]
    assert "script" not in names
    assert all(a.get("src", "").startswith("data:") for t, a in page.tags if t == "img")  # no injected <img>
    assert not any(k.startswith("on") for _, a in page.tags for k in a)  # no injected event handler attribute
    # The parser decodes the escapes back to the original text in every place it was used.
    assert page.all_text().count(EVIL) >= 8
    title = [a.get("alt") for t, a in page.tags if t == "img"][0]
    assert title == f"caption {EVIL}"  # attribute values are escaped too, and decode back intact


def test_images_round_trip_and_bad_images_are_refused():
    data = png(12, 7)
    page = Page(render(Document("r", "k", (), Verdict("incomplete", "h"), (Section("s", (Image(data, "image/png",
                                                                                              "c"),)),))))
    src = [a["src"] for t, a in page.tags if t == "img"][0]
    assert src.startswith("data:image/png;base64,")
    decoded = base64.b64decode(src.split(",", 1)[1])  # RFC 2397 data URL, base64 per RFC 4648
    assert decoded == data
    assert PILImage.open(io.BytesIO(decoded)).size == (12, 7)
    with pytest.raises(RequestError, match="not a image/png"):
        Image(b"GIF89a....", "image/png", "wrong")
    with pytest.raises(RequestError, match="image type"):
        Image(data, "image/svg+xml", "svg")
    with pytest.raises(RequestError, match="row 0 has 1 cells"):
        Table(("a", "b"), (("only",),))


def test_verdict_comes_first_and_hazards_last_with_every_standard_and_caution():
    verdict = Verdict("do-not-power", "Do not power: RMS torque fails.",
                      budget("elbow RMS torque", 0.81, 0.75, "N m", False), Margin("disk margin", 0.4, 0.3, "-", True))
    text = render(document(verdict))
    page = Page(text)
    order = [a.get("class") or a.get("id") for t, a in page.tags if t == "section"]
    assert order[0] == "verdict do-not-power"
    assert order[-1] == "hazards"
    body = page.all_text()
    assert body.index("Do not power") < body.index("Contents") < body.index("First plain")
    assert "elbow RMS torque" in body and "108 % used" in body  # 0.81 / 0.75 = 1.08
    for standard, subject in STANDARDS.items():
        assert standard in body and subject in body
    for caution in CAUTIONS:
        assert caution in body
    assert "ISO 13850 (emergency stop function)" in body and "local rule 7" in body


def test_figures_and_tables_are_numbered_in_order_and_numbers_align_right():
    page = Page(render(document()))
    body = page.all_text()
    assert body.index("Figure 1.") < body.index("Figure 2.")
    assert "Figure 3." not in body and "Table 1." in body
    cells = [(t, a.get("class")) for t, a in page.tags if t in ("td", "th")]
    # Column 2 holds "0.25" and "-": a number and a placeholder, so it is right-aligned; column 1 holds words.
    assert cells[:2] == [("th", None), ("th", "num")]
