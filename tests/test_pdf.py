"""The PDF pages: drawn the same as matplotlib's own text layout draws them."""

from __future__ import annotations

import contextlib
import re

import numpy as np

from perfcheck import pdf

BLOCKS = [("title", "Office roof — June 2025"),
          ("para", "Measured 4,321.5 kWh of 4,410.0 kWh expected (PR 81.3 %, interval 79.9 – "
                   "82.6 %), fine soiling at 12 °C; 1.2 W/m² offset, AVA To Wa fi fl."),
          ("lead", "The plant fell short by 2.0 %; most of it to soiling."),
          ("h", "1  Data coverage and quality"),
          ("table", (["Inverter", "Days with data", "Flagged rows"],
                     [["inv-1", "30 of 30", "12"], ["inv-2", "29 of 30", "1,440"]])),
          ("pre", "[site]\nname = \"Office roof\"\n  tilt_deg = 30.0"),
          ("figures", None)]


def _pages(tmp_path, name: str) -> bytes:
    pixels = {stem: np.full((40, 80, 3), 200, dtype=np.uint8)
              for stem, _, _ in pdf.figures.FIGURES}
    path = tmp_path / name
    pdf.write_pdf(BLOCKS, pixels, path, "Office roof")
    return re.sub(rb"/CreationDate \(D:\d+Z\)", b"", path.read_bytes())


def test_pages_as_matplotlib_lays_their_text_out(tmp_path, monkeypatch):
    # reference: matplotlib's own layout of each line (its PDF backend as shipped), which the
    # PDF without the glyph loads must equal byte for byte (text in regular, bold, italic and
    # monospace, kerned pairs, ligatures, signs outside ASCII)
    ours = _pages(tmp_path, "ours.pdf")
    monkeypatch.setattr(pdf, "_glyph_positions_only", contextlib.nullcontext)
    assert ours == _pages(tmp_path, "matplotlib.pdf")
