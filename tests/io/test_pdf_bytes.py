"""report.pdf comes out the same for the same report: the dates Chromium stamps are zeroed (the time of a run is in
provenance.json)."""
import re

import pytest

from chimeline.io.pdf import find_chromium, pdf_bytes


@pytest.mark.skipif(find_chromium() is None, reason="needs Chromium (the set-up installs it for the tests)")
def test_the_same_report_prints_to_the_same_pdf():
    html = "<!doctype html><html><body><h1>GM-TK-07</h1><p>invented tank, caution text</p></body></html>"
    a, b = pdf_bytes(html), pdf_bytes(html)
    assert a.startswith(b"%PDF") and a == b
    dates = re.findall(rb"/(?:CreationDate|ModDate) ?\(D:([0-9]+)", a)
    assert dates and all(set(d) == {ord("0")} for d in dates)
