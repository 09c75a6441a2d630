"""The run page (qgforce.jobs.runpage): records from file names, the page's checks, and the page itself
driven in headless Chromium (Debian's ``chromium``) through the DevTools protocol (tests/_chromium.py).

The browser test is skipped when Chromium is absent, unless QGFORCE_REQUIRE_BROWSER=1 (set by .ci/run).
"""

import io
import re
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.image as mpimg  # noqa: E402
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pytest  # noqa: E402

from qgforce.errors import InputDataError, OptionError  # noqa: E402
from qgforce.jobs.runpage import RUN_PAGE_NAME, MapRecord, records_from_files, write_run_page  # noqa: E402

STAMPS = ("20461119T0600", "20461119T1200", "20461119T1800")
FIELDS = ("omega_total", "temperature_advection")
LEVELS = (850, 500)


def _png(path: Path, number: int) -> None:
    """A small distinct image: a coloured background and a large number."""
    fig = plt.figure(figsize=(4.0, 3.0), dpi=60)
    fig.patch.set_facecolor(plt.cm.tab10(number % 10))
    fig.text(0.5, 0.5, str(number), ha="center", va="center", fontsize=60)
    fig.savefig(path, dpi=60)
    plt.close(fig)


@pytest.fixture
def run_dir(tmp_path):
    """A run directory laid out as the map jobs write it."""
    names = [f"{f}_{p}hPa_{t}.png" for f in FIELDS for p in LEVELS for t in STAMPS]
    names += [f"summary_{t}.png" for t in STAMPS] + [f"hours_to_saturation_{STAMPS[1]}.png"]
    for i, name in enumerate(names):
        _png(tmp_path / name, i)
    (tmp_path / ".omega_total_850hPa_x.png.1234.tmp").write_bytes(b"")  # a stale temporary: not a map
    (tmp_path / "results.nc").write_bytes(b"")
    return tmp_path


# ====================================================================== records and checks
def test_records_from_files_reads_the_map_names(run_dir):
    recs = records_from_files(run_dir)
    assert len(recs) == 2 * 2 * 3 + 3 + 1
    first = recs[0]
    assert first == MapRecord("hours_to_saturation", None, "2046-11-19 12:00", f"hours_to_saturation_{STAMPS[1]}.png")
    omega = [r for r in recs if r.field == "omega_total"]
    assert [(r.level_hpa, r.time) for r in omega[:4]] == [(850.0, "2046-11-19 06:00"), (850.0, "2046-11-19 12:00"),
                                                          (850.0, "2046-11-19 18:00"), (500.0, "2046-11-19 06:00")]
    assert {r.field for r in recs} == {"hours_to_saturation", "omega_total", "summary", "temperature_advection"}
    named = records_from_files(run_dir, [run_dir / "summary.png", "omega_total_500hPa.png", "section_w_20461119T0600.png"])
    assert [(r.field, r.level_hpa, r.time) for r in named] == [
        ("omega_total", 500.0, None), ("section_w", None, "2046-11-19 06:00"), ("summary", None, None)]
    with pytest.raises(InputDataError, match="not in the run directory"):
        records_from_files(run_dir, ["/elsewhere/omega_total_500hPa.png"])
    with pytest.raises(InputDataError, match="does not exist"):
        records_from_files(run_dir / "nope")


def test_write_run_page_is_self_contained_and_atomic(run_dir):
    page = write_run_page(run_dir, records_from_files(run_dir), title="An invented run <test>")
    assert page == run_dir / RUN_PAGE_NAME
    text = page.read_text(encoding="utf-8")
    assert "<title>An invented run &lt;test&gt;</title>" in text
    # no external resource: no URL scheme, no protocol-relative link, no stylesheet or script file
    assert not re.search(r"(https?:|//[a-z]|<link|<script src|@import|url\()", text, re.I)
    assert "← and → step through the times" in text
    for name in re.findall(r'"file": "([^"]+)"', text):
        assert (run_dir / name).is_file()
    assert not [p for p in run_dir.iterdir() if p.name.startswith(".index")]  # no temporary left
    with pytest.raises(InputDataError, match=r"exists; pass --overwrite"):
        write_run_page(run_dir, records_from_files(run_dir))
    write_run_page(run_dir, records_from_files(run_dir), overwrite=True)


@pytest.mark.parametrize("maps,error,match", [
    ([MapRecord("a", 500.0, None, "missing.png")], InputDataError, "do not exist"),
    ([MapRecord("a", 500.0, None, "/tmp/x.png")], InputDataError, "relative"),
    ([MapRecord("a", 500.0, None, "../x.png")], InputDataError, "relative"),
    ([], InputDataError, "at least one map"),
    (["summary.png"], OptionError, "MapRecord"),
])
def test_write_run_page_errors(run_dir, maps, error, match):
    with pytest.raises(error, match=match):
        write_run_page(run_dir, maps)
    assert not (run_dir / RUN_PAGE_NAME).exists()


def test_write_run_page_refuses_two_maps_for_one_choice(run_dir):
    name = f"summary_{STAMPS[0]}.png"
    with pytest.raises(InputDataError, match="two maps for field 'summary'"):
        write_run_page(run_dir, [MapRecord("summary", None, "t", name), MapRecord("summary", None, "t", name)])


def test_page_data_cannot_close_its_script(run_dir):
    name = f"summary_{STAMPS[0]}.png"
    text = write_run_page(run_dir, [MapRecord("summary", None, None, name, title="</script><b>x")]).read_text()
    assert text.count("</script>") == 2  # the data's "</script>" is escaped


# ====================================================================== the page in Chromium
def _state(b):
    return b.evaluate("({field: document.getElementById('field').value, level: document.getElementById('level').value,"
                      " time: document.getElementById('time').value, src: document.getElementById('map').src,"
                      " caption: document.getElementById('caption').textContent})")


def _image_loaded(b):
    return b.evaluate("new Promise((ok) => { const i = document.getElementById('map');"
                      " const done = () => ok(i.complete && i.naturalWidth > 0);"
                      " if (i.complete) done(); else { i.onload = done; i.onerror = done; } })", await_promise=True)


def _screenshot(b, path):
    data = b.screenshot()
    path.write_bytes(data)
    return mpimg.imread(io.BytesIO(data), format="png")[..., :3]


def test_run_page_in_headless_chromium(run_dir, browser, tmp_path):
    write_run_page(run_dir, records_from_files(run_dir), title="invented run")
    browser.open((run_dir / RUN_PAGE_NAME).resolve().as_uri())
    # every referenced image loads from the file system
    failed = browser.evaluate(
        "Promise.all(JSON.parse(document.getElementById('maps-data').textContent).map((m) => new Promise((ok) => {"
        " const i = new Image(); i.onload = () => ok(i.naturalWidth > 0 ? null : m.file);"
        " i.onerror = () => ok(m.file); i.src = m.file; }))).then((r) => r.filter((x) => x))", await_promise=True)
    assert failed == []
    assert _image_loaded(browser)
    s0 = _state(browser)
    assert s0["src"].endswith(f"hours_to_saturation_{STAMPS[1]}.png") and "UTC" in s0["caption"]
    shot0 = _screenshot(browser, tmp_path / "page_0.png")

    # the controls switch images: field, then level, then time
    browser.evaluate("(() => { const s = document.getElementById('field'); s.value = 'omega_total';"
                     " s.dispatchEvent(new Event('change')); })()")
    s1 = _state(browser)  # the chosen time is kept when the new field has it
    assert s1["src"].endswith(f"omega_total_850hPa_{STAMPS[1]}.png") and s1["level"] == "850"
    browser.evaluate("(() => { const s = document.getElementById('level'); s.value = '500';"
                     " s.dispatchEvent(new Event('change')); })()")
    assert _state(browser)["src"].endswith(f"omega_total_500hPa_{STAMPS[1]}.png")
    # the fields are offered, and the captions written, with the names the maps give them (the table of
    # output variables), not with the file-name words
    from qgforce import variables

    offered = browser.evaluate("Array.from(document.getElementById('field').options).map((o) => o.textContent)")
    assert variables.panel_title("omega_total") in offered and "omega total" not in offered
    assert _state(browser)["caption"].startswith(variables.panel_title("omega_total") + ", 500 hPa")
    browser.evaluate("(() => { const s = document.getElementById('time'); s.value = '2046-11-19 18:00';"
                     " s.dispatchEvent(new Event('change')); })()")
    assert _state(browser)["src"].endswith(f"omega_total_500hPa_{STAMPS[2]}.png")
    assert _image_loaded(browser)

    # the keyboard: ← and → step the time (stopping at the ends), ↑ and ↓ the level
    browser.press("ArrowLeft", 37)
    assert _state(browser)["src"].endswith(f"omega_total_500hPa_{STAMPS[1]}.png")
    assert _image_loaded(browser)
    shot1 = _screenshot(browser, tmp_path / "page_1.png")
    browser.press("ArrowRight", 39)
    browser.press("ArrowRight", 39)
    assert _state(browser)["src"].endswith(f"omega_total_500hPa_{STAMPS[2]}.png")
    browser.press("ArrowUp", 38)
    s2 = _state(browser)
    assert s2["level"] == "850" and s2["src"].endswith(f"omega_total_850hPa_{STAMPS[2]}.png")
    assert _image_loaded(browser)
    shot2 = _screenshot(browser, tmp_path / "page_2.png")
    assert "time 3 of 3" in browser.evaluate("document.getElementById('position').textContent")

    # screenshots: not blank (the page draws the image and the controls) and changed by a key press
    for shot in (shot0, shot1, shot2):
        assert shot.shape[0] > 300 and shot.shape[1] > 300
        assert shot.std() > 0.05
    assert np.abs(shot1 - shot2).mean() > 1e-3
    assert browser.problems() == []
