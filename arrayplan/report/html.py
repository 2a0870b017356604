"""A small, dependency-free HTML writer for one self-contained page.

Everything the page needs is inside it: the style sheet is inline, figures
are PNG data URIs, there are no scripts, fonts or links to other files, so
the report opens offline and can be mailed as one file.
"""

from __future__ import annotations

import base64
import html
from typing import Iterable, Sequence

__all__ = ["esc", "table", "figure_html", "page", "STYLE_SHEET"]

STYLE_SHEET = """
body { font-family: "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; font-size: 10.5pt; line-height: 1.4;
       color: #1a1a1a; max-width: 190mm; margin: 12mm auto; padding: 0 6mm; }
h1 { font-size: 18pt; margin-bottom: 2pt; }
h2 { font-size: 14pt; border-bottom: 1.5pt solid #3b528b; padding-bottom: 2pt; margin-top: 22pt; }
h3 { font-size: 11.5pt; margin-top: 14pt; }
p.meta { color: #555; font-size: 9pt; margin-top: 0; }
table { border-collapse: collapse; margin: 6pt 0 10pt 0; font-size: 9pt; }
th, td { border: 0.6pt solid #bbb; padding: 2pt 6pt; text-align: right; vertical-align: top; }
th { background: #eef1f7; }
td.text, th.text { text-align: left; }
figure { margin: 10pt 0; break-inside: avoid; page-break-inside: avoid; }
figure img { width: 100%; height: auto; border: 0.5pt solid #ddd; }
figcaption { font-size: 9pt; color: #333; margin-top: 3pt; }
.caution { border: 1.5pt solid #b35806; background: #fff4e6; padding: 6pt 10pt; margin: 12pt 0; }
.caution pre { white-space: pre-wrap; font-size: 9pt; margin: 4pt 0; }
.verdict { border-left: 4pt solid #3b528b; background: #f4f6fb; padding: 4pt 10pt; }
ul.conclusions { list-style: none; padding-left: 0; }
ul.conclusions li { margin: 3pt 0; }
.badge { display: inline-block; min-width: 5.5em; text-align: center; font-size: 8.5pt; font-weight: bold;
         border-radius: 2pt; padding: 0 4pt; margin-right: 4pt; border: 0.8pt solid #888; color: #333; }
.badge.pass { color: #1b7837; border-color: #1b7837; }
.badge.fail { color: #b2182b; border-color: #b2182b; }
.remedy { color: #7a3b00; }
p.overall { font-weight: bold; }
.pass { color: #1b7837; font-weight: bold; }
.fail { color: #b2182b; font-weight: bold; }
.note { color: #555; font-size: 9pt; }
code { font-size: 9pt; background: #f2f2f2; padding: 0 2pt; }
nav ol { margin-top: 2pt; }
@page { size: A4; margin: 15mm; }
@media print {
  body { max-width: none; margin: 0; padding: 0; }
  h2, h3 { break-after: avoid; page-break-after: avoid; }
  figure, table, .verdict, .caution { break-inside: avoid; page-break-inside: avoid; }
  figure img { break-after: avoid; page-break-after: avoid; }
  figcaption { break-before: avoid; page-break-before: avoid; }
  tr { break-inside: avoid; page-break-inside: avoid; }
}
"""


def esc(text: object) -> str:
    """HTML-escape ``str(text)``.

    Parameters
    ----------
    text : object
        Anything; its ``str`` is escaped.

    Returns
    -------
    str
        ``&``, ``<``, ``>`` and both quotes replaced by entities.
    """
    return html.escape(str(text), quote=True)


def table(header: Sequence[str], rows: Iterable[Sequence[object]], text_columns: Sequence[int] = (0,),
          cell_classes: dict[tuple[int, int], str] | None = None) -> str:
    """An HTML table; columns in `text_columns` are left-aligned, others right-aligned (numbers).

    Parameters
    ----------
    header : sequence of str
        Column headings.
    rows : iterable of sequences
        Cells of each row (any object, shown as escaped ``str``).
    text_columns : sequence of int
        0-based columns aligned left.
    cell_classes : dict of (int, int) to str, optional
        Maps 0-based (row, column) of the body to an extra CSS class (e.g. ``"pass"``).

    Returns
    -------
    str
        A ``<table>`` with a ``<thead>`` and a ``<tbody>``.
    """
    cell_classes = cell_classes or {}

    def cls(col: int, extra: str | None = None) -> str:
        names = (["text"] if col in text_columns else []) + ([extra] if extra else [])
        return f' class="{" ".join(names)}"' if names else ""

    head = "".join(f"<th{cls(c)}>{esc(h)}</th>" for c, h in enumerate(header))
    body = []
    for r, row in enumerate(rows):
        body.append("<tr>" + "".join(f"<td{cls(c, cell_classes.get((r, c)))}>{esc(v)}</td>"
                                     for c, v in enumerate(row)) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def figure_html(png: bytes, caption: str, alt: str) -> str:
    """A ``<figure>`` holding `png` as a data URI, with its caption.

    Parameters
    ----------
    png : bytes
        A PNG file.
    caption : str
        Plain text under the image (escaped).
    alt : str
        The image's alternative text (escaped).

    Returns
    -------
    str
    """
    data = base64.b64encode(png).decode("ascii")
    return (f'<figure><img src="data:image/png;base64,{data}" alt="{esc(alt)}">'
            f"<figcaption>{esc(caption)}</figcaption></figure>")


def page(title: str, body: str) -> str:
    """A complete HTML5 document with the inline style sheet.

    Parameters
    ----------
    title : str
        Plain text of the ``<title>`` (escaped).
    body : str
        HTML put inside ``<body>`` as it is.

    Returns
    -------
    str
    """
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f"<meta name=\"generator\" content=\"arrayplan\">\n<title>{esc(title)}</title>\n"
            f"<style>{STYLE_SHEET}</style>\n</head>\n<body>\n{body}\n</body>\n</html>\n")
