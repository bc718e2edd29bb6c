"""The report's HTML blocks: figures embedded for the page (common practice: a self-contained
report embeds its images; the figure files keep their full resolution)."""

from __future__ import annotations

import base64
import io
import re

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
from PIL import Image

from cohort.report.html import EMBED_MAX_WIDTH, figure


def _png(path, width_in, dpi=300):
    fig, ax = plt.subplots(figsize=(width_in, 3))
    ax.plot([0, 1, 2], [1, 3, 2])
    fig.savefig(path, dpi=dpi)
    plt.close(fig)
    return path.read_bytes()


def _embedded(html):
    data = re.search(r'src="data:image/png;base64,([^"]+)"', html).group(1)
    return Image.open(io.BytesIO(base64.b64decode(data)))


def test_a_wide_figure_is_scaled_for_the_page_and_its_file_is_unchanged(tmp_path):
    path = tmp_path / "wide.png"
    before = _png(path, width_in=7.2)  # 2160 px at 300 dpi: a double-column figure
    html = figure(path, "caption")
    image = _embedded(html)
    assert image.width == EMBED_MAX_WIDTH
    assert abs(image.height - round(900 * EMBED_MAX_WIDTH / 2160)) <= 1
    assert image.mode == "P"  # palette: the page's copy is lighter
    assert 'class="wide"' in html
    assert path.read_bytes() == before


def test_a_narrow_figure_keeps_its_size(tmp_path):
    path = tmp_path / "narrow.png"
    _png(path, width_in=3.5)  # 1050 px: a single-column figure
    html = figure(path, "caption")
    assert _embedded(html).width == 1050
    assert 'class="wide"' not in html
