"""Reports: self-contained HTML pages, matplotlib figures, and the profile writer.

:mod:`fractalseq.report.html` builds one HTML page that needs no network to
view (inline CSS and JavaScript, figures as base64 data URIs, every text
escaped).  :mod:`fractalseq.report.figures` turns results into PNG bytes with
a fixed house style and deterministic bytes; every figure is a
``matplotlib.figure.Figure`` with its own Agg canvas (no global backend
switch).  :mod:`fractalseq.report.profile` writes the folder of one source's
complexity profile, :mod:`fractalseq.report.drift` and
:mod:`fractalseq.report.scan` the folders of a drift test and of a windowed
scan, :mod:`fractalseq.report.density` the density image of the encoding.

The report only formats results; no estimator lives here, and matplotlib is
imported nowhere else in the package.
"""

from fractalseq.report.html import HtmlReport, Link, format_value

__all__ = ["HtmlReport", "Link", "format_value"]
