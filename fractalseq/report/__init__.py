"""Reports: self-contained HTML pages, matplotlib figures, and the profile writer.

:mod:`fractalseq.report.html` builds one HTML page that needs no network to
view (inline CSS and JavaScript, figures as base64 data URIs, every text
escaped).  :mod:`fractalseq.report.figures` turns results into PNG bytes with
a fixed house style and deterministic bytes.  :mod:`fractalseq.report.profile`
writes the folder of one source's complexity profile.

The report only formats results; no estimator lives here.
"""

from fractalseq.report.html import HtmlReport, Link, format_value

__all__ = ["HtmlReport", "Link", "format_value"]
