"""The dashboard's report-figure buttons in headless Chromium: the same one-page report as
`fluxfence figure --layout report` (one code path), as PDF and PNG."""

from __future__ import annotations

import pytest

from tests.browser.conftest import wait_for_series

pytestmark = pytest.mark.browser


def _download(page, button_id):
    with page.expect_download(timeout=120_000) as info:
        page.click(f"#{button_id}")
    return info.value


def test_report_figure_buttons_give_the_report_page(app_page, tmp_path):
    from pypdf import PdfReader
    from PIL import Image

    page = app_page
    wait_for_series(page, "Sample basin (invented)")
    page.wait_for_selector("#budget-table table")
    pdf = _download(page, "dl-report-pdf")
    assert pdf.suggested_filename.endswith("_report.pdf")
    path = tmp_path / "report.pdf"
    pdf.save_as(path)
    reader = PdfReader(str(path))
    assert len(reader.pages) == 1
    # A4 is 210 x 297 mm (ISO 216): 595.3 x 841.9 pt
    assert float(reader.pages[0].mediabox.width) == pytest.approx(595.3, abs=1.0)
    text = reader.pages[0].extract_text()
    for expected in ("Water-vapour budget: ", "Sample basin", "INVENTED SCENARIO", "mm/day",
                     "2025-01-15 00:00", "not a substitute for gauge records"):
        assert expected in text, expected

    png = _download(page, "dl-report-png")
    target = tmp_path / "report.png"
    png.save_as(target)
    with Image.open(target) as image:
        assert image.size == (1240, 1753)  # A4 as 8.27 x 11.69 in at 150 dpi, whole pixels
