"""A self-contained HTML report: one file, inline CSS, images as data URIs, no scripts, no network.

A report is plain data (:class:`Document` of :class:`Section` s holding :class:`Paragraph`, :class:`Table`,
:class:`Image` and :class:`Notes` blocks) rendered by :func:`render`. The page leads with the verdict and what limits
it, lists its sections, and always ends with the hazards, the standards cited and the cautions of
:mod:`upswing.safety`. All text is escaped; a Content-Security-Policy in the page forbids loading anything that is
not inline, so the file behaves the same offline and on a network.
"""

from __future__ import annotations

import base64
import html
import re
from collections.abc import Sequence
from dataclasses import dataclass, field

from matplotlib.figure import Figure

from upswing import __version__
from upswing.errors import RequestError
from upswing.report import style
from upswing.report.verdict import Margin, Verdict
from upswing.safety import CAUTIONS, GOVERNING, STANDARDS
from upswing.verification.budgets import Budget, usage
from upswing.verification.hazards import HazardNote

IMAGE_TYPES = ("image/png", "image/gif")
_NUMBER = re.compile(r"^[+\-−]?(\d+(\.\d*)?|\.\d+)([eE][+\-]?\d+)?( ?%)?$")


@dataclass(frozen=True)
class Paragraph:
    """A paragraph of plain text (escaped; no markup)."""

    text: str


@dataclass(frozen=True)
class Notes:
    """A bulleted list of short plain-text items."""

    items: tuple[str, ...]


@dataclass(frozen=True)
class Table:
    """A table of text cells; columns whose cells all read as numbers are right-aligned.

    Attributes
    ----------
    header : tuple of str
        Column headings (put units here, e.g. ``"peak [N m]"``).
    rows : tuple of tuple of str
        Cells, each row as long as ``header``.
    caption : str
        Shown above the table after "Table n.".
    """

    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    caption: str = ""

    def __post_init__(self) -> None:
        for k, row in enumerate(self.rows):
            if len(row) != len(self.header):
                raise RequestError(f"table {self.caption!r}: row {k} has {len(row)} cells; the header has "
                                   f"{len(self.header)}")


@dataclass(frozen=True)
class Image:
    """An inline image with its caption.

    Attributes
    ----------
    data : bytes
        The encoded image (PNG or GIF).
    mime : str
        ``"image/png"`` or ``"image/gif"``.
    caption : str
        Shown below the image after "Figure n.".
    alt : str
        Text for readers who cannot see the image (defaults to the caption).
    """

    data: bytes = field(repr=False)
    mime: str
    caption: str
    alt: str = ""

    def __post_init__(self) -> None:
        if self.mime not in IMAGE_TYPES:
            raise RequestError(f"image type must be one of {', '.join(IMAGE_TYPES)}; got {self.mime!r}")
        signature = {"image/png": b"\x89PNG\r\n\x1a\n", "image/gif": b"GIF8"}[self.mime]
        if not self.data.startswith(signature):
            raise RequestError(f"image {self.caption!r}: data is not a {self.mime} file")


def figure_image(figure: Figure, caption: str, alt: str = "") -> Image:
    """A matplotlib figure rendered to PNG as an :class:`Image`."""
    return Image(style.png_bytes(figure), "image/png", caption, alt)


Block = Paragraph | Notes | Table | Image


@dataclass(frozen=True)
class Section:
    """A titled part of the report; ``key`` is its anchor (letters, digits and hyphens)."""

    title: str
    blocks: tuple[Block, ...]
    key: str = ""

    @property
    def anchor(self) -> str:
        return self.key or re.sub(r"[^a-z0-9]+", "-", self.title.lower()).strip("-") or "section"


@dataclass(frozen=True)
class Document:
    """A whole report.

    Attributes
    ----------
    title : str
        Main heading (usually the rig's name).
    kind : str
        What sort of report this is, shown above the title ("rig and modes report").
    facts : tuple of (str, str)
        Label/value pairs shown under the title (rig file, content hash, family, date, ...).
    verdict : Verdict
        Shown first.
    sections : tuple of Section
        The body, in order; a hazards section is always added after them.
    hazards : tuple of HazardNote
        Hazards specific to this rig and run (:class:`upswing.verification.hazards.HazardNote`: topic, text and
        the standards it points to).
    """

    title: str
    kind: str
    facts: tuple[tuple[str, str], ...]
    verdict: Verdict
    sections: tuple[Section, ...]
    hazards: tuple[HazardNote, ...] = ()


# ------------------------------------------------------------------------------------------------------------ CSS
# The figures' inks as CSS variables, so page and figures share one palette.
_INKS = {"ink": style.INK, "slate": style.SLATE, "ochre": style.OCHRE, "rule": style.RULE, "shade": style.SHADE,
         "sand": style.SAND, "fail": style.FAIL, "grid": style.GRID}
_CSS_VARIABLES = ":root { " + " ".join(f"--{name}: {value};" for name, value in _INKS.items()) + " }"
_CSS = """
* { box-sizing: border-box; }
html { background: #f6f7f8; }
body { margin: 0 auto; max-width: 62rem; padding: 1.5rem 2rem 3rem; background: #fff; color: var(--ink);
       font: 15px/1.5 "DejaVu Sans", "Segoe UI", "Helvetica Neue", Arial, sans-serif; }
header.masthead { border-bottom: 3px solid var(--ink); padding-bottom: .6rem; margin-bottom: 1.2rem; }
.kind { font-size: .8rem; letter-spacing: .12em; text-transform: uppercase; color: var(--rule); margin: 0; }
h1 { font-size: 1.7rem; margin: .1rem 0 .5rem; line-height: 1.2; }
dl.facts { display: grid; grid-template-columns: max-content 1fr; gap: .1rem 1rem; margin: 0; font-size: .85rem; }
dl.facts dt { color: var(--rule); }
dl.facts dd { margin: 0; overflow-wrap: anywhere; }
section.verdict { border: 2px solid var(--ink); border-left-width: 14px; padding: .9rem 1.2rem;
                  margin: 0 0 1.5rem; }
section.verdict.power { border-color: var(--slate); }
section.verdict.do-not-power { border-color: var(--fail);
  background: repeating-linear-gradient(135deg, #fff 0 14px, #f7efed 14px 20px); }
section.verdict.incomplete { border-style: dashed; border-left-style: solid; border-color: var(--rule); }
.status { font-size: 1.35rem; font-weight: bold; letter-spacing: .04em; text-transform: uppercase; margin: 0; }
.headline { font-size: 1.05rem; margin: .3rem 0 .8rem; }
.limits { display: grid; grid-template-columns: 1fr 1fr; gap: .8rem; }
.limit { background: #fff; border: 1px solid var(--grid); padding: .5rem .7rem; }
.limit h3 { font-size: .75rem; letter-spacing: .1em; text-transform: uppercase; color: var(--rule); margin: 0; }
.limit .what { font-weight: bold; margin: .15rem 0 0; }
.limit .amount { margin: 0; font-variant-numeric: tabular-nums; }
.gauge { height: .55rem; background: var(--shade); margin-top: .35rem; position: relative; }
.gauge span { display: block; height: 100%; background: var(--slate); }
.gauge.over span { background: var(--fail); }
.gauge::after { content: ""; position: absolute; top: -.2rem; bottom: -.2rem; left: 80%;
                border-left: 2px solid var(--ink); }
.reasons { margin: .7rem 0 0; padding-left: 1.2rem; font-size: .9rem; }
nav.contents { font-size: .9rem; margin-bottom: 1.5rem; }
nav.contents ol { margin: .3rem 0 0; padding-left: 1.4rem; columns: 2; }
nav.contents h2 { font-size: .8rem; letter-spacing: .12em; text-transform: uppercase; color: var(--rule); margin: 0;
                  border: 0; padding: 0; }
a { color: var(--slate); }
main > section { margin: 2rem 0 0; }
h2 { font-size: 1.25rem; border-bottom: 1px solid var(--rule); padding-bottom: .2rem; margin: 0 0 .8rem; }
h2 .number { color: var(--ochre); margin-right: .5rem; font-variant-numeric: tabular-nums; }
p { margin: .5rem 0; max-width: 48rem; }
figure { margin: 1rem 0 1.4rem; }
figure img { display: block; max-width: 100%; height: auto; margin: 0 auto; border: 1px solid var(--grid); }
figcaption, .caption { font-size: .85rem; color: var(--ink); margin-top: .4rem; max-width: 48rem; }
figcaption b, .caption b { margin-right: .3rem; }
caption.caption { caption-side: top; text-align: left; margin: 0 0 .3rem; }
table { border-collapse: collapse; margin: .4rem 0 1.2rem; font-size: .88rem; min-width: 50%; }
th { text-align: left; border-bottom: 2px solid var(--ink); padding: .25rem .8rem .25rem 0; vertical-align: bottom; }
td { border-bottom: 1px solid var(--grid); padding: .2rem .8rem .2rem 0; vertical-align: top; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
ul.notes { padding-left: 1.2rem; }
.hazard { border-left: 4px solid var(--ochre); padding: .1rem 0 .1rem .8rem; margin: .8rem 0; }
.hazard h3 { font-size: 1rem; margin: 0; }
.hazard .cites { font-size: .82rem; color: var(--rule); margin: .1rem 0 0; }
footer { margin-top: 2.5rem; border-top: 1px solid var(--rule); padding-top: .6rem; font-size: .8rem;
         color: var(--rule); }
@media (max-width: 40rem) { .limits { grid-template-columns: 1fr; } nav.contents ol { columns: 1; } }
@media print { html { background: #fff; } body { max-width: none; padding: 0; }
               figure, table, .hazard, section.verdict { break-inside: avoid; } }
"""

# Nothing but inline styles and data: images may load; a stray external reference is blocked, not fetched.
_POLICY = "default-src 'none'; img-src data:; style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'"

STATUS_WORDS = {"power": "Cleared to power, at reduced limits first", "do-not-power": "Do not power",
                "incomplete": "No verdict yet"}


def esc(text: object) -> str:
    """HTML-escape any value's text (quotes too, so it is safe inside attributes)."""
    return html.escape(str(text), quote=True)


def _is_number(cell: str) -> bool:
    """A cell that reads as a number, or an empty / "-" placeholder (which does not stop right-alignment)."""
    text = cell.strip()
    return text in ("", "-", "\u2013", "\u2014") or bool(_NUMBER.match(text))


class _Counter:
    def __init__(self) -> None:
        self.figures = 0
        self.tables = 0


def _block(block: Block, counter: _Counter) -> str:
    if isinstance(block, Paragraph):
        return f"<p>{esc(block.text)}</p>"
    if isinstance(block, Notes):
        return '<ul class="notes">' + "".join(f"<li>{esc(item)}</li>" for item in block.items) + "</ul>"
    if isinstance(block, Table):
        counter.tables += 1
        numeric = [all(_is_number(row[j]) for row in block.rows) and bool(block.rows)
                   for j in range(len(block.header))]
        head = "".join(f'<th{" class=num" if n else ""} scope="col">{esc(h)}</th>'
                       for h, n in zip(block.header, numeric, strict=True))
        body = "".join("<tr>" + "".join(f'<td{" class=num" if n else ""}>{esc(c)}</td>'
                                        for c, n in zip(row, numeric, strict=True)) + "</tr>"
                       for row in block.rows)
        caption = f'<caption class="caption"><b>Table {counter.tables}.</b>{esc(block.caption)}</caption>'
        return f"<table>{caption}<thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"
    if isinstance(block, Image):
        counter.figures += 1
        source = f"data:{block.mime};base64,{base64.b64encode(block.data).decode('ascii')}"
        return (f'<figure><img src="{source}" alt="{esc(block.alt or block.caption)}">'
                f"<figcaption><b>Figure {counter.figures}.</b>{esc(block.caption)}</figcaption></figure>")
    raise TypeError(f"not a report block: {type(block).__name__}")


def _budget_card(budget: Budget | None) -> str:
    if budget is None:
        return ('<div class="limit"><h3>Tightest budget</h3><p class="what">none measured yet</p></div>')
    share = 100.0 * usage(budget)
    over = "" if budget.ok is not False else " over"
    # The gauge's full width is 125 % of the limit; its tick (at 80 % of the width) marks the limit itself.
    width = max(0.0, min(100.0, share / 1.25))
    return (f'<div class="limit"><h3>Tightest budget</h3><p class="what">{esc(budget.name)}</p>'
            f'<p class="amount">{esc(f"{budget.value:.3g} of {budget.limit:.3g} {budget.unit}")} '
            f"({share:.0f} % used){'' if budget.ok is not False else ' &mdash; <b>fails</b>'}</p>"
            f'<div class="gauge{over}" role="img" aria-label="{share:.0f} percent of the limit used">'
            f'<span style="width: {width:.1f}%"></span></div></div>')


def _margin_card(margin: Margin | None) -> str:
    if margin is None:
        return '<div class="limit"><h3>Smallest margin</h3><p class="what">none measured yet</p></div>'
    unit = "" if margin.unit in ("", "-") else f" {margin.unit}"
    return (f'<div class="limit"><h3>Smallest margin</h3><p class="what">{esc(margin.name)}</p>'
            f'<p class="amount">{esc(f"{margin.value:.3g}{unit}")}, required at least '
            f'{esc(f"{margin.required:.3g}{unit}")} ({esc(f"{margin.ratio:.3g}")} times the minimum)'
            f"{'' if margin.ok else ' &mdash; <b>fails</b>'}</p></div>")


def _verdict(verdict: Verdict) -> str:
    reasons = ""
    if verdict.reasons:
        reasons = '<ul class="reasons">' + "".join(f"<li>{esc(r)}</li>" for r in verdict.reasons) + "</ul>"
    mark = {"power": "&#x25CF;", "do-not-power": "&#x25A0;", "incomplete": "&#x25CB;"}[verdict.status]
    return (f'<section class="verdict {verdict.status}" aria-label="verdict">'
            f'<p class="status">{mark} {esc(STATUS_WORDS[verdict.status])}</p>'
            f'<p class="headline">{esc(verdict.headline)}</p>'
            f'<div class="limits">{_budget_card(verdict.tightest)}{_margin_card(verdict.smallest)}</div>'
            f"{reasons}</section>")


def hazards_section(hazards: Sequence[HazardNote]) -> str:
    """The closing section: the run's hazards, the usual cautions, and the standards cited."""
    parts = []
    for hazard in hazards:
        cites = "; ".join(f"{s} ({STANDARDS[s]})" if s in STANDARDS else s for s in hazard.standards)
        parts.append(f'<div class="hazard"><h3>{esc(hazard.topic)}</h3><p>{esc(hazard.text)}</p>'
                     + (f'<p class="cites">See {esc(cites)}.</p>' if cites else "") + "</div>")
    if not hazards:
        parts.append("<p>No rig-specific hazard was flagged; the cautions below apply to every rig.</p>")
    parts.append("<h3>Before every power-up</h3>")
    parts.append('<ul class="notes">' + "".join(f"<li>{esc(c)}</li>" for c in CAUTIONS) + "</ul>")
    rows = "".join(f"<tr><td>{esc(n)}</td><td>{esc(s)}</td></tr>" for n, s in STANDARDS.items())
    parts.append('<table><caption class="caption"><b>Standards cited.</b>Read the standards themselves; '
                 "this list only says what each covers.</caption><thead><tr><th scope=col>standard</th>"
                 f"<th scope=col>covers</th></tr></thead><tbody>{rows}</tbody></table>")
    return "".join(parts)


def render(document: Document) -> str:
    """The whole report as one HTML string (UTF-8, no external references)."""
    counter = _Counter()
    anchors = [s.anchor for s in document.sections] + ["hazards"]
    if len(set(anchors)) != len(anchors):
        raise RequestError(f"section anchors must be unique; got {anchors}")
    facts = "".join(f"<dt>{esc(k)}</dt><dd>{esc(v)}</dd>" for k, v in document.facts)
    contents = "".join(f'<li><a href="#{esc(s.anchor)}">{esc(s.title)}</a></li>' for s in document.sections)
    contents += '<li><a href="#hazards">Hazards and cautions</a></li>'
    body = []
    for number, section in enumerate(document.sections, start=1):
        blocks = "".join(_block(b, counter) for b in section.blocks)
        body.append(f'<section id="{esc(section.anchor)}"><h2><span class="number">{number}</span>'
                    f"{esc(section.title)}</h2>{blocks}</section>")
    body.append(f'<section id="hazards"><h2><span class="number">{len(document.sections) + 1}</span>'
                f"Hazards and cautions</h2>{hazards_section(document.hazards)}</section>")
    return "\n".join([
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        f'<meta http-equiv="Content-Security-Policy" content="{_POLICY}">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f'<meta name="generator" content="upswing {esc(__version__)}">',
        '<link rel="icon" href="data:,">',
        f"<title>{esc(document.kind)}: {esc(document.title)}</title>",
        f"<style>{_CSS_VARIABLES}{_CSS}</style>",
        "</head>",
        "<body>",
        f'<header class="masthead"><p class="kind">{esc(document.kind)}</p><h1>{esc(document.title)}</h1>'
        f'<dl class="facts">{facts}</dl></header>',
        _verdict(document.verdict),
        f'<nav class="contents"><h2>Contents</h2><ol>{contents}</ol></nav>',
        "<main>",
        *body,
        "</main>",
        f"<footer>{esc(GOVERNING)} Made by upswing {esc(__version__)}.</footer>",
        "</body>",
        "</html>",
        "",
    ])
