"""The page: a growing list of HTML parts, embedded figures, and the static assets.

The stylesheet and the self-check script are files of this package (``assets/``), read with
:mod:`importlib.resources` and allowed by hash in the page's Content-Security-Policy.
"""
from __future__ import annotations

import base64
import functools
import hashlib
from importlib import resources
from pathlib import Path

from .formatting import _e, _png_size
from .reading import _Results, _rel

#: largest PNG embedded (bytes)
MAX_IMAGE_BYTES = 24 << 20


@functools.cache
def asset(name: str) -> str:
    """The text of a static asset of the report (``assets/<name>``)."""
    return resources.files(__package__).joinpath("assets", name).read_text(encoding="utf-8")


def _csp_hash(text: str) -> str:
    return "'sha256-" + base64.b64encode(hashlib.sha256(text.encode("utf-8")).digest()).decode("ascii") + "'"


class _Page:
    """Builds the HTML; counts figures and images."""

    def __init__(self, res: _Results):
        self.res = res
        self.parts: list[str] = []
        self.n_fig = 0
        self.n_img = 0

    def add(self, *chunks: str):
        self.parts.extend(chunks)

    def figure(self, path: Path | None, alt: str, caption_html: str, what: str) -> None:
        """Embed a PNG (if present and valid) with a numbered caption; otherwise say why it is missing."""
        data = None
        reason = "not written (the fit was run without figures)"
        if path is not None and path.is_file():
            try:
                if path.stat().st_size > MAX_IMAGE_BYTES:
                    reason = f"too large to embed (over {MAX_IMAGE_BYTES >> 20} MB)"
                else:
                    data = path.read_bytes()
                    if _png_size(data) is None:
                        data, reason = None, "not a PNG image"
            except OSError as exc:
                data, reason = None, f"unreadable ({type(exc).__name__})"
        if data is None:
            self.add(f'<p class="missing">{_e(what)}: {_e(path.name if path else "figure")} {reason}.</p>')
            return
        self.n_fig += 1
        self.n_img += 1
        w, h = _png_size(data)
        uri = "data:image/png;base64," + base64.b64encode(data).decode("ascii")
        self.add(f'<figure id="fig{self.n_fig}"><img src="{uri}" width="{w}" height="{h}" alt="{_e(alt)}">'
                 f'<figcaption><b>Figure {self.n_fig}. {_e(what)}.</b> {caption_html} '
                 f'<span class="small">(from <code>{_e(_rel(path, self.res.root))}</code>)</span>'
                 f'</figcaption></figure>')

    def html(self, title: str) -> str:
        css, script = asset("report.css"), asset("selfcheck.js")
        csp = (f"default-src 'none'; img-src data:; style-src {_csp_hash(css)}; "
               f"script-src {_csp_hash(script)}; base-uri 'none'; form-action 'none'")
        head = ('<!DOCTYPE html>\n'
                f'<html lang="en" data-images="{self.n_img}">\n<head>\n<meta charset="utf-8">\n'
                f'<meta http-equiv="Content-Security-Policy" content="{csp}">\n'
                '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
                '<meta name="generator" content="bayesprobe report">\n'
                f'<title>{_e(title)}</title>\n<style>{css}</style>\n<script>{script}</script>\n</head>\n')
        return head + "<body>\n" + "\n".join(self.parts) + "\n</body>\n</html>\n"
