"""The HTML report of a sweep: content, escaping, embedded figures, well-formed HTML, a real browser.

(Named test_sweep_report.py: tests/analysis/test_report.py already takes the module name
test_report, and the test folders are not packages.)
"""

from __future__ import annotations

import base64
import io
import json
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from beadmd import DataError
from beadmd.studies.common import Figure, StudyResult, Table
from beadmd.studies.report import format_value, read_sweep, write_report

MALICIOUS = "<script>alert('x')</script>"
VOID_ELEMENTS = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "wbr"}


def row(quantity: str, value, error, unit: str = "sigma^2", note: str = "") -> dict:
    return {
        "quantity": quantity,
        "value": value,
        "error": error,
        "tau_int": 2.0,
        "n_eff": 50.0,
        "n": 200,
        "unit": unit,
        "note": note,
    }


def synthetic_point(i: int, n: int, status: str = "finished", message: str = "") -> dict:
    full_hash = f"{i:02d}" + "0123456789abcdef" * 3 + f"{n:014d}"
    results = {}
    if status == "finished":
        results = {
            "mean_square_radius_of_gyration": row("mean_square_radius_of_gyration", 0.3 * n**1.176, 0.01 * n),
            "mean_square_end_to_end_distance": row(
                "mean_square_end_to_end_distance", 1.9 * n**1.176, 0.05 * n
            ),
            "nu_from_internal_distances": row(
                "nu_from_internal_distances", 0.5883, 0.0041, "1", "s in [2, 8]"
            ),
            "beads_per_chain": row("beads_per_chain", n, 0.0, "1"),
        }
    return {
        "hash": full_hash,
        "status": status,
        "message": message,
        "parameters": {"system.beads_per_chain": n, "pairs.AA.attraction": 0.0},
        "config": {"system": {"beads_per_chain": n}},
        "results": results,
        "provenance": {
            "config_sha256": full_hash,
            "beadmd_version": "0.1.0",
            "seed": 100 + i,
            "wall_time_s": 12.5 * (i + 1),
            "steps": 20000,
            "host": "node-7",
        },
    }


def write_sweep(directory: Path, name: str = "good-solvent scaling") -> tuple[Path, list[dict]]:
    points = [
        synthetic_point(0, 16),
        synthetic_point(1, 32),
        synthetic_point(2, 64, "failed", f"step 1200: bond 3-4 broke <{MALICIOUS}>"),
        synthetic_point(3, 128, "pending"),
    ]
    document = {
        "sweep": {
            "name": name,
            "study": "scaling",
            "base_sha256": "ab" * 32,
            "axes": {"system.beads_per_chain": [16, 32, 64, 128], "pairs.AA.attraction": [0.0]},
            "beadmd_version": "0.1.0",
            "created": "2025-03-04T05:06:07+00:00",
        },
        "points": points,
    }
    directory.mkdir(parents=True)
    (directory / "results.json").write_text(json.dumps(document), encoding="utf-8")
    return directory, points


def red_line_png() -> bytes:
    """A figure that is easy to find on a screenshot: a thick pure-red line on white."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(5.0, 3.5), dpi=100, facecolor="white")
    ax.plot([0, 1], [0, 1], color=(1.0, 0.0, 0.0), linewidth=10, solid_capstyle="butt")
    ax.set_title("a red line")
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", facecolor="white")
    plt.close(fig)
    return buffer.getvalue()


def study(png: bytes) -> StudyResult:
    table = Table(
        title="Fitted exponent",
        columns=["window", "nu", "nu error", "chi2", "Rg2"],
        rows=[
            ["N >= 16", 0.5883, 0.0041, 1.25, {"value": 5.2, "error": 0.05}],
            ["N >= 32", 0.59, None, None, None],
        ],
        caption=f"caption with {MALICIOUS}",
    )
    return StudyResult(
        kind="scaling",
        tables=[table],
        figures=[Figure(title="Rg^2 against N", png=png, caption="a <b>bold</b> claim")],
        values={"nu": {"value": 0.5883, "error": 0.0041}, "points_used": 2},
        notes=[f"note {MALICIOUS}"],
    )


class TagBalance(HTMLParser):
    """Every element closed, in order (void elements need no end tag)."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.problems: list[str] = []
        self.tags: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag not in VOID_ELEMENTS:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.problems.append(f"</{tag}> closes {self.stack[-1] if self.stack else 'nothing'}")
        else:
            self.stack.pop()


def test_values_are_rounded_to_their_errors():
    assert format_value(0.5883, 0.0041) == "0.588 ± 0.004"
    assert format_value(0.5883, 0.0123) == "0.588 ± 0.012"  # two digits when the error starts with 1
    assert format_value(123.456, 2.5) == "123.5 ± 2.5"
    assert format_value(12345.0, 230.0) == "12340 ± 230"
    assert format_value(1.234e-5, 5e-8) == "(1.234 ± 0.005)e-05"
    assert format_value(2.0e7, 3.0e5) == "(2.00 ± 0.03)e+07"
    assert format_value(7, 0.0) == "7"  # an exact value
    assert format_value(None, 0.1) == "—" and format_value(float("nan"), None) == "—"


def test_report_shows_every_point_escapes_text_embeds_figures_and_is_well_formed(tmp_path):
    sweep_dir, points = write_sweep(tmp_path / "sweep", name=MALICIOUS)
    png = red_line_png()
    path = write_report(sweep_dir, [study(png)])
    assert path == sweep_dir / "report.html"
    text = path.read_text(encoding="utf-8")

    # Nothing from the data gets in as markup.
    assert MALICIOUS not in text and "<b>bold" not in text
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt;" in text
    parser = TagBalance()
    parser.feed(text)
    parser.close()
    assert parser.problems == [] and parser.stack == []
    tags = [t for t, _ in parser.tags]
    assert "script" not in tags and "link" not in tags
    assert tags.count("table") == 4  # key values, the study table, points, provenance (meta: a <dl>)
    # Self-contained: the only image is the figure, as a data URI that decodes to its bytes.
    images = [attrs for t, attrs in parser.tags if t == "img"]
    assert len(images) == 1
    prefix = "data:image/png;base64,"
    assert images[0]["src"].startswith(prefix)
    assert base64.b64decode(images[0]["src"][len(prefix) :]) == png
    assert not re.search(r"(src|href)=\"(?!data:|#)", text) and "url(" not in text

    # The sweep, every point and its provenance.
    for expected in ("scaling", "2025-03-04T05:06:07+00:00", "0.1.0", "node-7", "system.beads_per_chain"):
        assert expected in text
    for p in points:
        assert f'title="{p["hash"]}"' in text  # full hash on hover
        assert p["hash"][:12] in text
        assert str(p["provenance"]["seed"]) in text
    assert "0.588 ± 0.004" in text  # nu of the points table, the folded table column, the key value
    assert text.count("0.588 ± 0.004") == 2 + 1 + 1
    assert "5.20 ± 0.05" in text  # a {"value", "error"} cell
    assert "25.0 s" in text  # wall time of point 1
    assert "step 1200: bond 3-4 broke" in text and "failed" in text and "pending" in text
    assert 'title="s in [2, 8]"' in text  # a value's note


def test_read_sweep_names_missing_and_corrupt_files(tmp_path):
    with pytest.raises(DataError, match="results.json.*not found"):
        read_sweep(tmp_path)
    (tmp_path / "results.json").write_text('{"points": [', encoding="utf-8")
    with pytest.raises(DataError, match="cannot be read"):
        read_sweep(tmp_path)
    (tmp_path / "results.json").write_text('{"rows": []}', encoding="utf-8")
    with pytest.raises(DataError, match='"points" list'):
        write_report(tmp_path, [])
    assert not (tmp_path / "report.html").exists()


CHROMIUM = shutil.which("chromium") or ("/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None)


def screenshot(html_path: Path, png_path: Path, profile: Path) -> np.ndarray:
    import matplotlib.image

    command = [
        CHROMIUM,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-dev-shm-usage",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--hide-scrollbars",
        f"--user-data-dir={profile}",
        f"--screenshot={png_path}",
        "--window-size=1200,2400",
        html_path.resolve().as_uri(),
    ]
    done = subprocess.run(command, capture_output=True, text=True, timeout=120)
    assert png_path.is_file(), f"no screenshot (exit {done.returncode}): {done.stderr[-2000:]}"
    return matplotlib.image.imread(png_path)


def red_pixels(image: np.ndarray) -> np.ndarray:
    r, g, b = image[..., 0], image[..., 1], image[..., 2]
    return (r > 0.9) & (g < 0.15) & (b < 0.15)


@pytest.mark.skipif(
    CHROMIUM is None, reason="no headless browser: /usr/bin/chromium (Debian package chromium) absent"
)
def test_the_report_renders_its_figure_in_a_real_browser(tmp_path):
    sweep_dir, _ = write_sweep(tmp_path / "sweep")
    png = red_line_png()
    good = write_report(sweep_dir, [study(png)])
    # The same page with the image data broken: the check must fail on it.
    text = good.read_text(encoding="utf-8")
    encoded = base64.b64encode(png).decode("ascii")
    assert text.count(encoded) == 1
    broken = tmp_path / "broken.html"
    broken.write_text(text.replace(encoded, "iVBORw0KGgoAAAAbroken"), encoding="utf-8")

    shot_good = screenshot(good, tmp_path / "good.png", tmp_path / "profile-good")
    shot_broken = screenshot(broken, tmp_path / "broken.png", tmp_path / "profile-broken")
    assert shot_good.shape[:2] == (2400, 1200)
    # Page text rendered in both (dark pixels), so the browser did draw the page.
    for shot in (shot_good, shot_broken):
        assert np.count_nonzero(shot[..., :3].max(axis=-1) < 0.3) > 2000
    # The figure's line: ~10 px wide and ~300 px long at 100 dpi, so thousands of pure-red pixels.
    red = red_pixels(shot_good)
    assert np.count_nonzero(red) > 1500
    rows, cols = np.nonzero(red)
    assert cols.max() - cols.min() > 200 and rows.max() - rows.min() > 100  # a line, not a speck
    assert np.count_nonzero(red_pixels(shot_broken)) < 50
