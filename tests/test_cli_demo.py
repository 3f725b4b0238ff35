"""``geosoil demo --out DIR``: the whole job on the bundled demo farm, from any folder.

The demo runs once per test session (``demo_run`` in ``tests/conftest.py``: ``geosoil demo
--out demo-out`` from an unrelated working folder); these tests read what it printed and wrote.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
from click.testing import CliRunner
from geosoil.cli.main import cli


def test_help() -> None:
    r = CliRunner().invoke(cli, ["demo", "--help"])
    assert r.exit_code == 0 and "--out" in r.stdout and "invented" in r.stdout


def test_top_level_help_lists_the_five_commands_and_says_rates_are_advisory() -> None:
    r = CliRunner().invoke(cli, ["--help"])
    assert r.exit_code == 0
    for command in ("new", "check", "run", "demo", "explain"):
        assert re.search(rf"^  {command}\s", r.stdout, re.M)
    assert "advisory" in r.stdout
    assert "--quiet" in r.stdout and "--verbose" in r.stdout
    r = CliRunner().invoke(cli, ["--version"])
    assert r.exit_code == 0 and "geosoil" in r.stdout


def test_unknown_command_and_option_are_usage_errors() -> None:
    r = CliRunner().invoke(cli, ["demoo"])
    assert r.exit_code == 2 and "demoo" in r.stderr and r.stdout == ""
    r = CliRunner().invoke(cli, ["--loud", "demo"])
    assert r.exit_code == 2 and "--loud" in r.stderr


def test_demo_runs_from_any_folder_into_a_relative_out(demo_run) -> None:  # noqa: ANN001
    r = demo_run.cli
    assert r.exit_code == 0, r.stderr
    out: Path = demo_run.out
    record = json.loads((out / "run.json").read_text())
    assert record["project_file"] == str((demo_run.farm / "geosoil.toml").resolve())
    assert out.parent == demo_run.cwd  # the relative --out, in the working folder
    assert {"tonnage.csv", "map.html", "report.html", "samples.csv", "passes.csv"} <= {
        p.name for p in out.iterdir()}
    assert "Bellbird Rise" in (out / "report.html").read_text(encoding="utf-8")
    assert "Cautions:" in r.stdout and "Farm" in r.stdout
    assert "demo farm project" in r.stderr


def test_demo_writes_nothing_into_the_demo_folder(demo_run) -> None:  # noqa: ANN001
    assert demo_run.after == demo_run.before


def test_demo_needs_out() -> None:
    r = CliRunner().invoke(cli, ["demo"])
    assert r.exit_code == 2 and "--out" in r.stderr and r.stdout == ""


def test_demo_refuses_its_own_folder_and_a_used_folder(demo_run, tmp_path: Path) -> None:  # noqa: ANN001
    r = CliRunner().invoke(cli, ["demo", "--out", str(demo_run.farm), "--overwrite"])
    assert r.exit_code == 1 and r.stdout == ""
    assert "\nerror: the output folder" in r.stderr and "input" in r.stderr
    (tmp_path / "used").mkdir()
    (tmp_path / "used" / "notes.txt").write_text("mine")
    r = CliRunner().invoke(cli, ["demo", "--out", str(tmp_path / "used")])
    assert r.exit_code == 1 and "--overwrite" in r.stderr
    assert [p.name for p in (tmp_path / "used").iterdir()] == ["notes.txt"]


# --------------------------------------------------------------------------- map and report


def _map_data(out: Path) -> dict:
    page = (out / "map.html").read_text(encoding="utf-8")
    m = re.search(r'<script type="application/json" id="geosoil-data">(.*?)</script>', page, re.S)
    assert m
    return json.loads(m.group(1))


def _report_table(page: str, css: str) -> list[list[str]]:
    """Rows of the report's table of class ``css`` as text."""
    import html as html_mod

    table = page[page.index(f'<table class="{css}">'):]
    table = table[: table.index("</table>")]
    rows = re.findall(r"<tr[^>]*>(.*?)</tr>", table, re.S)
    return [[html_mod.unescape(re.sub(r"<[^>]+>", "", c)).strip()
             for c in re.findall(r"<t[dh][^>]*>(.*?)</t[dh]>", r, re.S)] for r in rows]


def test_demo_map_has_every_written_surface_and_opens_on_the_largest_prescription(
        demo_run) -> None:  # noqa: ANN001
    out: Path = demo_run.out
    data = _map_data(out)
    ids = [s["id"] for s in data["surfaces"]]
    written = {p.stem for p in (out / "surfaces").rglob("*.tif")}
    for var in ("esp", "ph_cacl2", "acid_sat", "al_sat", "k", "k_sat", "ca_sat", "ecec"):
        assert var in ids and var in written
    assert {f"{v}_sd" for v in ("ca", "mg", "k", "na", "acidity", "al", "ph_cacl2")} <= set(ids)
    ph = next(s for s in data["surfaces"] if s["id"] == "ph_cacl2")
    assert ph["title"] == "pH (CaCl2)"  # the demo's lab measured pH in CaCl2
    # the largest prescription by tonnes (tonnage.csv farm rows), with the surface behind it
    farm_rows = [r.split(",") for r in (out / "tonnage.csv").read_text().splitlines()
                 if r.startswith("farm,")]
    header = (out / "tonnage.csv").read_text().splitlines()[0].split(",")
    tonnes = {r[header.index("product")]: float(r[header.index("tonnes")]) for r in farm_rows}
    largest = max(tonnes, key=lambda k: tonnes[k])
    assert data["open"]["product"] == largest
    assert data["open"]["surface"] == ("al" if largest == "lime" else "esp")  # Kamprath: Al
    creek = [e for e in data["exclusions"] if e["name"] == "Bellbird Creek"]
    assert creek and all(e["kind"] == "creek buffer" for e in creek)
    fields = [f[0] for f in data["samples"]["fields"]]
    assert "pH (CaCl2)" in fields and "EC 1:5" in fields  # EC 1:5 read as an analyte (dS/m)


def test_demo_report_uses_one_area_per_paddock_and_counts_cells_for_the_glance(
        demo_run) -> None:  # noqa: ANN001
    import rasterio

    out: Path = demo_run.out
    page = (out / "report.html").read_text(encoding="utf-8")
    lines = (out / "tonnage.csv").read_text().splitlines()
    header = lines[0].split(",")
    paddock_area = {}
    for line in lines[1:]:
        row = line.split(",")
        if row[0] == "paddock":
            paddock_area[row[header.index("paddock")]] = float(row[header.index("area_ha")])
    glance = _report_table(page, "glance")
    head = glance[0]
    density = {r[0]: r for r in _report_table(page, "density")[1:]}
    for row in glance[1:]:
        name = row[0]
        assert row[1] == f"{paddock_area[name]:,.2f}"  # the tonnage table's figure
        assert density[name][2] == row[1]  # the density table's figure
        assert f"{row[1]} ha · " in page  # the paddock's own section
        # sodic area = cells of the written ESP surface at or above 6 % x cell area
        slug = name.lower().replace(" ", "-")
        with rasterio.open(out / "surfaces" / slug / "esp.tif") as src:
            esp = src.read(1, masked=True)
            cell_ha = abs(src.transform.a * src.transform.e) / 1e4
        sodic = float(((esp >= 6).filled(False)).sum() * cell_ha)
        strongly = float(((esp >= 15).filled(False)).sum() * cell_ha)
        assert row[head.index("sodic, ESP ≥ 6 % (ha)")] == f"{sodic:,.2f}"
        assert row[head.index("strongly sodic, ESP ≥ 15 % (ha)")] == f"{strongly:,.2f}"
    creek = [r for r in glance[1:] if r[0] == "Creek Flat"][0]
    assert float(creek[head.index("creek buffer (ha)")]) > 0
    assert "creek buffer: Bellbird Creek (not spread)" in page
    for title in ("ESP (exchangeable sodium)", "pH (CaCl2)", "Acid saturation"):
        assert f"aria-label=\"Map of {title}\"" in page


def test_demo_report_lists_the_warnings_the_summary_prints(demo_run) -> None:  # noqa: ANN001
    import html as html_mod

    out: Path = demo_run.out
    page = (out / "report.html").read_text(encoding="utf-8")
    section = page[page.index('<ul class="warnings">'):]
    listed = [html_mod.unescape(w) for w in
              re.findall(r"<li>(.*?)</li>", section[: section.index("</ul>")], re.S)]
    record = json.loads((out / "run.json").read_text())
    assert listed == record["warnings"]
    summary = [line[4:] for line in demo_run.cli.stderr.splitlines()
               if line.startswith("  - ")]
    assert summary == listed


def _caution_items(page: str) -> list[str]:
    """The text of each item of the report's cautions box, read by Python's own HTML parser."""
    from html.parser import HTMLParser

    class Reader(HTMLParser):
        def __init__(self) -> None:
            super().__init__(convert_charrefs=True)
            self.depth = 0  # >0 inside <section id="cautions">
            self.items: list[str] = []
            self.in_item = False

        def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
            if self.depth:
                self.depth += tag == "section"
                if tag == "li":
                    self.in_item = True
                    self.items.append("")
            elif tag == "section" and ("id", "cautions") in attrs:
                self.depth = 1

        def handle_endtag(self, tag: str) -> None:
            if self.depth:
                self.depth -= tag == "section"
                self.in_item = self.in_item and tag != "li"

        def handle_data(self, data: str) -> None:
            if self.in_item:
                self.items[-1] += data

    reader = Reader()
    reader.feed(page)
    return [" ".join(item.split()) for item in reader.items]


def test_the_summary_run_json_and_report_give_the_same_cautions(demo_run) -> None:  # noqa: ANN001
    """Issue: the command line's cautions left out the per-paddock gypsum-water caution
    (leaching water, drainage) that run.json and the report carried. One list, three places."""
    from geosoil.report import CAUTIONS

    record = demo_run.record
    lines = demo_run.cli.stdout.splitlines()
    start = lines.index("Cautions:")
    printed = [ln[4:] for ln in lines[start + 1:] if ln.startswith("  * ")]
    reported = _caution_items((demo_run.out / "report.html").read_text(encoding="utf-8"))
    assert printed == record["cautions"] == reported
    gypsum = [c for c in printed if c.startswith("Gypsum on ")]
    assert gypsum and len(printed) == len(CAUTIONS) + len(gypsum)  # the demo has sodic paddocks
    assert all("drains" in c and "mm" in c for c in gypsum)


def test_the_report_and_readme_say_gypsum_takes_no_credit_for_lime_s_calcium(demo_run) -> None:  # noqa: ANN001
    """Issue: the report did not say that gypsum takes no credit for the calcium lime
    supplies. The report's methods table says so on the gypsum row (the demo gets both),
    and README's methods section says so where it describes gypsum."""
    import html as html_mod

    from geosoil.rates import GYPSUM_NO_LIME_CREDIT

    page = html_mod.unescape((demo_run.out / "report.html").read_text(encoding="utf-8"))
    text = " ".join(page.split())
    methods = text[text.index('id="assumptions"'):]
    row = methods[methods.index("<td>gypsum</td>"):]
    row = row[:row.index("</tr>")]
    assert "Handbook 60" in row and GYPSUM_NO_LIME_CREDIT in row, row
    readme = (Path(__file__).parent.parent / "README.md").read_text(encoding="utf-8")
    section = " ".join(readme[readme.index("## Methods, in short"):].split())
    gypsum = section[section.index("- Gypsum for sodicity"):]
    assert gypsum.index("no credit for the calcium that lime supplies") < gypsum.index("Lime for")
    assert "conservative on purpose" in gypsum[:gypsum.index("Lime for")]


@pytest.mark.browser
def test_demo_map_every_layer_on_a_phone_offline(demo_run, browser) -> None:  # noqa: ANN001
    from tests.browser import artifact_path

    out: Path = demo_run.out
    page = browser.new_page(width=390, height=844)
    try:
        page.goto(out / "map.html")
        got = page.evaluate(
            """(async () => {
              const g = window.geosoilMap, out = [];
              document.querySelector('#gs-panel .gs-toggle').click();
              for (const r of document.querySelectorAll('input[name=gs-surface]')) {
                r.click();
                if (r.value) { await g.surfaces[r.value].getElement().decode(); }
                const panel = document.getElementById('gs-panel').getBoundingClientRect();
                out.push({value: r.value,
                          images: document.querySelectorAll('img.leaflet-image-layer').length,
                          legend: Array.from(document.querySelectorAll(
                            '#gs-legend .gs-legend-entry[data-surface]'))
                            .map(e => e.dataset.surface),
                          inside: panel.left >= 0 && panel.right <= innerWidth
                                  && panel.bottom <= innerHeight});
              }
              return out;
            })()""")
        page.screenshot(artifact_path("demo-map-phone.png"))
        assert len(got) >= 20
        for g in got:
            assert g["images"] == (1 if g["value"] else 0), g
            assert g["legend"] == ([g["value"]] if g["value"] else []), g
            assert g["inside"], g
        assert page.console_errors == [] and page.dialogs == []
        assert [u for u in page.requests if not u.startswith(("file:", "data:"))] == []
    finally:
        page.close()


def test_demo_map_paddock_names_sit_inside_their_own_paddock(demo_run) -> None:  # noqa: ANN001
    """Each paddock's name is placed at a point well inside that paddock (its pole of
    inaccessibility), not on a boundary it shares with the next one; checked with shapely
    against the demo's own paddock file."""
    import geopandas as gpd
    import shapely

    from tests.demofarm import DEMO

    page = (demo_run.out / "map.html").read_text(encoding="utf-8")
    m = re.search(r'<script type="application/json" id="geosoil-data">(.*?)</script>', page, re.S)
    assert m
    pads = gpd.read_file(DEMO / "paddocks.geojson").to_crs(32755).set_index("name")
    labels = json.loads(m.group(1))["paddocks"]
    assert len(labels) == len(pads) == 3
    for p in labels:
        lat, lon = p["at"]
        at = gpd.GeoSeries([shapely.Point(lon, lat)], crs=4326).to_crs(32755).iloc[0]
        own = pads.loc[p["name"], "geometry"]
        assert own.contains(at), p["name"]
        assert own.boundary.distance(at) > 100.0, p["name"]  # paddocks are 400 m+ across
        for other, geom in pads.geometry.items():
            if other != p["name"]:
                assert geom.distance(at) > 100.0, (p["name"], other)


@pytest.mark.browser
def test_demo_map_labels_never_overlap_on_a_phone(demo_run, browser) -> None:  # noqa: ANN001
    """At 390 x 844 px, and zoomed out, every paddock name shows and no two shown labels
    (names and zone rates) overlap: zone rates give way."""
    from tests.browser import artifact_path

    probe = """(() => {
      const all = Array.from(document.querySelectorAll('.gs-paddock-label, .gs-zone-label'));
      const shown = all.filter(e => getComputedStyle(e).visibility !== 'hidden'
                                    && e.getBoundingClientRect().width > 0);
      const r = shown.map(e => e.getBoundingClientRect());
      let overlaps = 0;
      for (let i = 0; i < r.length; i++) for (let j = i + 1; j < r.length; j++)
        if (r[i].left < r[j].right && r[j].left < r[i].right
            && r[i].top < r[j].bottom && r[j].top < r[i].bottom) overlaps++;
      return {overlaps, names: shown.filter(e => e.classList.contains('gs-paddock-label')).length,
              zones: shown.length, all: all.length};
    })()"""
    page = browser.new_page(width=390, height=844)
    try:
        page.goto(demo_run.out / "map.html")
        browser.drain(0.3)
        got = page.evaluate(probe)
        page.screenshot(artifact_path("demo-map-phone-labels.png"))
        assert got["overlaps"] == 0 and got["names"] == 3, got
        # labels lie above the sample dots but a tap goes through them to what is below
        through = page.evaluate("""Array.from(document.querySelectorAll('.gs-paddock-label'))
          .map(e => { const r = e.getBoundingClientRect();
                      const hit = document.elementFromPoint(r.left + r.width / 2,
                                                            r.top + r.height / 2);
                      return !e.contains(hit); })""")
        assert through == [True, True, True]
        page.evaluate("window.geosoilMap.map.setZoom(window.geosoilMap.map.getZoom() - 2), null")
        browser.drain(0.5)
        got = page.evaluate(probe)
        assert got["overlaps"] == 0, got
        assert page.console_errors == []
    finally:
        page.close()


def test_the_demo_s_comments_column_is_no_warning_but_is_in_run_json(demo_run) -> None:  # noqa: ANN001
    # user trial: every demo run warned that 'Comments' was not read; it keeps records, so
    # the summary says nothing of it and run.json keeps every column not read
    assert "Comments" not in demo_run.cli.stdout + demo_run.cli.stderr
    assert not any("Comments" in w for w in demo_run.record["warnings"])
    assert demo_run.record["samples"]["columns_not_read"] == {
        "Comments": "record keeping, not an analyte"}


def test_a_rule_that_ran_and_found_no_need_is_in_run_json_and_methods_not_the_summary(
        demo_run) -> None:  # noqa: ANN001
    # user trial: every demo run's summary said "Rules that gave no product: the calcium
    # rule ran ..." though nothing was wrong; run.json and the report's methods keep it
    assert "Rules that gave no product" not in demo_run.cli.stdout
    assert "calcium rule ran" not in demo_run.cli.stdout
    assert demo_run.record["rules"]["gave_no_product"] == [
        "the calcium rule ran and no cell needs its product"]
    page = (demo_run.out / "report.html").read_text(encoding="utf-8")
    methods = page[page.index('id="assumptions"'):]
    methods = methods[:methods.index("</section>")]
    assert "Rules that gave no product" in methods and "calcium rule ran" in methods
    assert 'id="not-prescribed"' not in page  # nothing under the title
