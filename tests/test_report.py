"""report.html: one self-contained page that parses, loads nothing, shows every conductor name
and Maxwell entry, escapes names; and the couplings ranked by size.

References: html.parser of the Python standard library reads the page; the ordering of the
couplings follows from Coulomb's law (equal spheres couple more the closer they are, common
practice, no source)."""

import json
from html.parser import HTMLParser

import meshio
import numpy as np
import pytest
from conftest import run_cli as run

from bem3d.geometry import shapes

#: SI prefixes as the page writes them (from memory: the SI brochure's table of prefixes).
PREFIX = {"a": 1e-18, "f": 1e-15, "p": 1e-12, "n": 1e-9, "u": 1e-6, "m": 1e-3, "": 1.0}
#: Three equal spheres on the x axis (mm): gaps 1 and 2 between neighbours.
NAMES_AT = {"left": 0.0, "<b>&x": 3.0, "right": 7.0}


class Page(HTMLParser):
    """Text, tags and the src/href attributes of a page."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.text, self.links, self.images, self.open = [], [], 0, []

    def handle_starttag(self, tag, attrs):
        self.open.append(tag)
        self.images += tag == "img"
        self.links += [value for name, value in attrs if name in ("src", "href")]

    def handle_data(self, data):
        self.text.append(data)


def parse(html):
    page = Page()
    page.feed(html)
    page.close()
    return page


@pytest.fixture
def spheres(tmp_path):
    files = []
    for name, x in NAMES_AT.items():
        points, tris = shapes.octahedral_sphere(1.0, 4, center=(x, 0.0, 0.0))
        files.append(tmp_path / f"{name}.stl")
        meshio.write(files[-1], meshio.Mesh(points, [("triangle", tris)]))
    return files


def check_page(html, record):
    page = parse(html)
    text = "".join(page.text)
    # self-contained: every picture is inline, nothing is fetched
    assert all(link.startswith("data:") for link in page.links), page.links
    assert "<b>&x" not in html and "&lt;b&gt;&amp;x" in html
    for name in record["conductors"]:
        assert name in text
    # every Maxwell entry as printed, in the unit the page names
    unit = text.split("Maxwell capacitance matrix [", 1)[1].split("]", 1)[0]
    assert unit.endswith("F")
    scale = PREFIX[unit[:-1]]
    for row in record["maxwell_capacitance_F"]:
        for value in row:
            assert f"{value / scale:#.5g}" in text
    assert record["caution"] in text
    return page, text


def test_extract_report_is_one_self_contained_escaped_page(spheres, tmp_path, capsys):
    out = tmp_path / "res"
    code, stdout, err = run(["extract", *spheres, "--units", "mm", "--volts", "left=1",
                             "--out", out, "--report"], capsys)
    assert code == 0, err
    assert "report.html" in stdout
    record = json.loads((out / "result.json").read_text())
    _, text = check_page((out / "report.html").read_text(encoding="utf-8"), record)
    assert "Couplings, largest first" in text and "Solver record" in text


def test_couplings_rank_closest_pair_first(spheres, tmp_path, capsys):
    from bem3d.api import extract
    from bem3d.results import ranked_couplings

    result = extract(spheres, units="mm")
    ranked = ranked_couplings(result.names, result.maxwell)
    # gaps 1 (left, <b>&x), 2 (<b>&x, right) and 5 (left, right): coupling falls with distance
    assert [(c.a, c.b) for c in ranked] == [("left", "<b>&x"), ("<b>&x", "right"),
                                            ("left", "right")]
    c = result.maxwell
    i, j = result.names.index("left"), result.names.index("<b>&x")
    # the mutual capacitance is -C_ij and its shares are of the Maxwell diagonal (definition)
    assert ranked[0].capacitance == pytest.approx(-c[i, j])
    assert ranked[0].share_a == pytest.approx(-c[i, j] / c[i, i])
    assert ranked[0].share_b == pytest.approx(-c[i, j] / c[j, j])
    # the console's second block lists them in the same order
    lines = result.table().splitlines()
    start = next(k for k, line in enumerate(lines) if line.startswith("Couplings"))
    assert [line.split(" - ")[0] for line in lines[start + 2:start + 5]] == ["left", "<b>&x",
                                                                              "left"]


def test_field_report_has_energy_peaks_forces_and_pictures(spheres, tmp_path, capsys):
    out = tmp_path / "field"
    code, _, err = run(["field", *spheres, "--units", "mm", "--volts", "left=1", "right=-1",
                        "--floating", "<b>&x", "--points", "11", "--out", out, "--report"],
                       capsys)
    assert code == 0, err
    record = json.loads((out / "result.json").read_text())
    page, text = check_page((out / "report.html").read_text(encoding="utf-8"), record)
    for heading in ("Energy balance", "Peak fields", "Forces", "floating"):
        assert heading in text
    assert page.images == 2 and record["field_caution"] in text
    # the floating conductor is listed with its computed potential
    assert f"{record['floating_potentials_V']['<b>&x']:.6g}" in text
    assert np.isfinite(record["energy_grid_J"])
