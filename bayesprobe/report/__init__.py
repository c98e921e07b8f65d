"""``bayesprobe report``: one self-contained HTML page for a results folder.

A results folder is one of

* a **fit folder** (``summary.json``, ``parameters.csv``, ``posterior.nc`` and the
  figures ``fit.png``, ``corner.png``, ``trace.png``, ``eedf.png``) as written by
  ``bayesprobe fit``;
* a **folder of fit folders**, such as the output of ``bayesprobe demo`` (which
  adds ``demo_table.csv`` with the known truth of its synthetic sweeps);
* a **batch folder** (``results.csv``, ``results.nc``, ``sweeps/<id>.json``,
  ``profiles.png``) as written by ``bayesprobe batch``.

The page embeds the existing PNG figures as ``data:`` URIs, carries its own
stylesheet and a small self-check script, and loads nothing from the network
(a Content-Security-Policy forbids it). Every number on the page is read from
``summary.json``, ``results.csv``, ``sweeps/<id>.json`` or ``demo_table.csv``
and written inside ``<data value="...">`` with its full-precision value, so it
can be traced back to those files. Every string read from the folder is
untrusted and HTML-escaped.

On load, the self-check script sets ``data-selfcheck`` on the ``<html>`` element
to ``ok:N`` (all N images decoded, no script error, no blocked resource) or to
``fail:...`` with the reasons; the test suite reads it from a headless browser.

The package is split along its jobs: :mod:`.reading` (what a folder holds, through
:mod:`bayesprobe.schema`), :mod:`.alerts` (the warnings, rules from :mod:`bayesprobe.checks`),
:mod:`.formatting` (escaping, traced numbers, registry labels), :mod:`.tables` and
:mod:`.blocks` (the HTML pieces), :mod:`.page` (figures and the static assets in ``assets/``)
and :mod:`.sections` (the page and :func:`build_report`).
"""
from __future__ import annotations

from .reading import find_results
from .sections import REPORT_NAME, SAFETY_NOTE, SELFCHECK_ATTRIBUTE, build_report

__all__ = ["build_report", "write_report", "find_results", "REPORT_NAME", "SAFETY_NOTE", "SELFCHECK_ATTRIBUTE"]

#: the same function under the name the API documentation uses for writers
write_report = build_report
