"""Matplotlib figures to SVG that is byte-identical on every render (conventions.md: a fixed
`svg.hashsalt` and no date in the metadata), accessible (`role="img"`, `<title>` and `<desc>` named
by `aria-labelledby`), safe to inline beside other charts in one page (every generated id is
prefixed), carrying figures for machines as `data-*` attributes on named groups, and the cautions
twice: in the `<desc>` and as a footnote drawn below the chart, since a chart is also served alone."""

import io
import re
import textwrap
import threading
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from typing import Any
from xml.sax.saxutils import escape, quoteattr

import matplotlib
from matplotlib.figure import Figure
from matplotlib.typing import RcKeyType

FONT = "DejaVu Sans"  # Debian fonts-dejavu-core; matplotlib measures with the same metrics
STYLE: dict[RcKeyType, Any] = {
    "svg.hashsalt": "berth-report-v1",
    "svg.fonttype": "none",  # real <text>: selectable, searchable, read by screen readers
    "font.family": "sans-serif",
    "font.sans-serif": [FONT],
    "font.size": 9.0,
    "axes.titlesize": 10.0,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": 9.0,
    "axes.edgecolor": "#5f6b77",
    "axes.linewidth": 0.8,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#d9dee3",
    "grid.linewidth": 0.6,
    "xtick.color": "#3b4652",
    "ytick.color": "#3b4652",
    "text.color": "#1d2733",
    "axes.labelcolor": "#1d2733",
    "hatch.linewidth": 0.7,
    "legend.frameon": False,
    "legend.fontsize": 8.5,
}
SVG_METADATA: dict[str, str | None] = {"Date": None, "Creator": "berth reports"}

# Matplotlib keeps global state; one chart at a time per process keeps renders independent.
_LOCK = threading.Lock()


@contextmanager
def chart_style() -> Iterator[None]:
    """The report's chart style, applied while a figure is built and saved."""
    with _LOCK, matplotlib.rc_context(STYLE):
        yield


_ID = re.compile(r'\bid="([^"]+)"')
_URL = re.compile(r"url\(#([^)]+)\)")
_HREF = re.compile(r'((?:xlink:)?href)="#([^"]+)"')


FOOTNOTE_PT = 7.0
FOOTNOTE_LINE_PT = 9.0
FOOTNOTE_MARGIN_PT = 8.0
# DejaVu Sans averages about 0.55 em a character; 0.6 leaves room for wide words.
FOOTNOTE_CHAR_PT = 0.6 * FOOTNOTE_PT
_SIZE = re.compile(r'width="([\d.]+)pt" height="([\d.]+)pt" viewBox="0 0 ([\d.]+) ([\d.]+)"')


def _with_footnote(text: str, *, prefix: str, cautions: Sequence[str]) -> str:
    """The SVG made taller by a footnote below the figure: the cautions in small type, wrapped to the
    chart's width, on white. The figure itself is not redrawn, so its layout is unchanged."""
    size = _SIZE.search(text)
    if size is None or not cautions:
        return text
    width, height = float(size.group(3)), float(size.group(4))
    columns = max(40, int((width - 2 * FOOTNOTE_MARGIN_PT) / FOOTNOTE_CHAR_PT))
    lines = [line for caution in cautions for line in textwrap.wrap(caution, columns)]
    extra = FOOTNOTE_MARGIN_PT + FOOTNOTE_LINE_PT * len(lines)
    total = height + extra
    text = text.replace(size.group(0), f'width="{width:g}pt" height="{total:g}pt" viewBox="0 0 {width:g} {total:g}"', 1)
    rows = "".join(
        f'\n  <text x="{FOOTNOTE_MARGIN_PT:g}" y="{height + FOOTNOTE_LINE_PT * (k + 1):g}" '
        f'style="font-family: \'{FONT}\', sans-serif; font-size: {FOOTNOTE_PT:g}px; fill: #3b4652">'
        f"{escape(line)}</text>" for k, line in enumerate(lines))
    footnote = (f'<g id="{prefix}-cautions" class="cautions">\n  <rect x="0" y="{height:g}" width="{width:g}" '
                f'height="{extra:g}" style="fill: #ffffff"/>{rows}\n </g>\n')
    end = text.rindex("</svg>")
    return text[:end] + footnote + text[end:]


def finish(figure: Figure, *, prefix: str, title: str, description: str,
           groups: Mapping[str, Mapping[str, str]], cautions: Sequence[str]) -> str:
    """The figure as an `<svg>` element (no XML prolog, so it can be inlined in HTML or served
    alone). `groups` maps the gids given to artists to the `data-*` attributes their group gets;
    those gids are kept as they are and every other id is prefixed with `prefix`. The cautions end
    the `<desc>` and are drawn as a footnote below the figure."""
    buffer = io.StringIO()
    figure.savefig(buffer, format="svg", metadata=SVG_METADATA)
    text = buffer.getvalue()
    text = text[text.index("<svg"):]

    def own(name: str) -> str:
        return name if name in groups else f"{prefix}-{name}"

    text = _ID.sub(lambda m: f'id="{own(m.group(1))}"', text)
    text = _URL.sub(lambda m: f"url(#{own(m.group(1))})", text)
    text = _HREF.sub(lambda m: f'{m.group(1)}="#{own(m.group(2))}"', text)
    for gid, attributes in groups.items():
        marker = f'<g id="{gid}">'
        if marker not in text:
            raise ValueError(f"chart group {gid!r} was not drawn")
        extra = "".join(f" data-{name}={quoteattr(value)}" for name, value in attributes.items())
        text = text.replace(marker, f'<g id="{gid}"{extra}>', 1)
    head_end = text.index(">") + 1
    opening = text[:head_end - 1] + (f' role="img" aria-labelledby="{prefix}-title {prefix}-desc"'
                                     f' class="chart" data-chart="{prefix}">')
    described = " ".join([description, "Cautions:", *cautions]) if cautions else description
    heading = (f'\n <title id="{prefix}-title">{escape(title)}</title>'
               f'\n <desc id="{prefix}-desc">{escape(described)}</desc>')
    return _with_footnote(opening + heading + text[head_end:], prefix=prefix, cautions=cautions)


def standalone(svg: str) -> str:
    """An `<svg>` element as a file of its own."""
    return '<?xml version="1.0" encoding="utf-8" standalone="no"?>\n' + svg
