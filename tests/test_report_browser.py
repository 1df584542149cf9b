"""The report in a real browser: headless Chromium (Debian's chromium + chromedriver) driven by Selenium.

Opened from disk, the pointer is moved to the pixel of a known hill's echo (placed by geometry
alone); the readout must name the hill's position and side, and clicking must pin it.
`make test` and `.ci/run` install the browser (.ci/install-browser); without one this module is
skipped with the reason.
"""

from __future__ import annotations

import math
import re
import shutil
from pathlib import Path

import numpy as np
import pyproj
import pytest

CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
CHROMEDRIVER = "/usr/bin/chromedriver"

selenium = pytest.importorskip("selenium", reason="selenium is not installed (pip install -e '.[test]')")
if not (Path(CHROMIUM).exists() and Path(CHROMEDRIVER).exists()):
    pytest.skip(f"no headless browser: {CHROMIUM} or {CHROMEDRIVER} missing (Debian: apt-get install chromium "
                "chromium-driver; .ci/install-browser does it as root)", allow_module_level=True)  # fmt: skip

from selenium import webdriver  # noqa: E402
from selenium.webdriver.chrome.service import Service  # noqa: E402
from selenium.webdriver.common.action_chains import ActionChains  # noqa: E402
from selenium.webdriver.common.by import By  # noqa: E402
from selenium.webdriver.common.keys import Keys  # noqa: E402
from selenium.webdriver.support.ui import WebDriverWait  # noqa: E402

from cluttersim.report import write_report  # noqa: E402
from scenes import UTM, UTM_X0_M, UTM_Y0_M  # noqa: E402
from test_attribution import C, DOME_CENTRE_Z_M, DOME_EAST_M, DOME_RADIUS_M, dome_range_m  # noqa: E402
from test_report import ALT_M, NTRACE, dome_run, make_comparison  # noqa: E402

ICE = 3.15  # ε′ of water ice (common practice), the report's default
CELL_M = 10.0  # the dome scene's DEM cells


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    d = tmp_path_factory.mktemp("browser")
    run = dome_run(d)
    return run, write_report(run, d / "report.html")


@pytest.fixture()
def browser(tmp_path):
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync",
                 f"--user-data-dir={tmp_path / 'chromium-profile'}", "--window-size=1400,1300"):  # fmt: skip
        options.add_argument(flag)
    # the driver is given explicitly, so Selenium Manager never looks for (or downloads) one
    driver = webdriver.Chrome(service=Service(executable_path=CHROMEDRIVER), options=options)
    try:
        yield driver
    finally:
        driver.quit()


def parse_lat_lon(lat_text: str, lon_text: str) -> tuple[float, float]:
    lat = re.fullmatch(r"([\d.]+)° ([NS])", lat_text.strip())
    lon = re.fullmatch(r"([\d.]+)° ([EW])", lon_text.strip())
    assert lat and lon, (lat_text, lon_text)
    return float(lat[1]) * (1 if lat[2] == "N" else -1), float(lon[1]) * (1 if lon[2] == "E" else -1)


def move_to_cell(driver, stage, trace: int, sample: int):
    """Pointer to the centre of the image pixel of (trace, sample), as an offset from the stage's centre."""
    meta = driver.execute_script("return META.grids.sim.shape")
    rect = driver.execute_script("const r = arguments[0].getBoundingClientRect(); return [r.width, r.height];", stage)
    col, row = trace // meta["trace_step"], sample // meta["sample_step"]
    dx = (col + 0.5) / meta["columns"] * rect[0] - rect[0] / 2
    dy = (row + 0.5) / meta["rows"] * rect[1] - rect[1] / 2
    ActionChains(driver).move_to_element_with_offset(stage, round(dx), round(dy)).perform()


def text(driver, element_id: str) -> str:
    return driver.find_element(By.ID, element_id).text


def test_pointing_at_the_hills_echo_names_the_hill_and_its_side(page, browser, tmp_path):
    from cluttersim.io.radargram import open_radargram

    run, report = page
    ds = open_radargram(run / "radargram.nc")
    browser.get(report.resolve().as_uri())
    WebDriverWait(browser, 60).until(lambda d: d.execute_script("return document.body.dataset.ready") == "1")

    # the hill's echo at closest approach, from geometry alone (tests/test_attribution.py): the cap's
    # sphere is nearest along the line to its centre, R = √(x² + (h − zc)²) − Rs, delay 2R/c
    apex = NTRACE // 2
    assert abs(ds["lat"].values[apex] - pyproj.Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)
               .transform(UTM_X0_M, UTM_Y0_M)[1]) < 1e-6  # fmt: skip
    dt = float(ds["delay"].values[1])
    sample = round((2 * dome_range_m(ALT_M, 0.0) / C - float(ds["window_start"][apex])) / dt)
    stage = browser.find_element(By.ID, "rg-stage")
    move_to_cell(browser, stage, apex, sample)

    # the pixel ↔ (trace, sample) mapping is exact
    assert text(browser, "probe-trace") == str(apex)
    assert text(browser, "probe-sample") == str(sample)
    assert text(browser, "probe-delay") == f"{sample * dt * 1e6:.3f} µs after window start"
    # apparent depth below the trace's nadir surface: d = c Δt / (2√ε′) (common practice)
    depth = C * (float(ds["window_start"][apex]) + sample * dt - float(ds["nadir_delay"][apex])) / (2 * math.sqrt(ICE))
    shown = float(re.match(r"([−\-\d.]+) m", text(browser, "probe-depth"))[1].replace("−", "-"))
    assert shown == pytest.approx(depth, abs=0.06)
    assert "dBW" in text(browser, "probe-power")

    # the readout names the hill: its point nearest the antenna, from the sphere's geometry
    lat, lon = parse_lat_lon(text(browser, "probe-src-lat"), text(browser, "probe-src-lon"))
    ax, az = 0.0 - DOME_EAST_M, ALT_M - DOME_CENTRE_Z_M
    near_east = DOME_EAST_M + DOME_RADIUS_M * ax / math.hypot(ax, az)  # 616.8 m east of the track
    x, y = pyproj.Transformer.from_crs("EPSG:4326", UTM, always_xy=True).transform(lon, lat)
    assert math.hypot(x - (UTM_X0_M + near_east), y - UTM_Y0_M) <= 2 * CELL_M  # within two DEM cells
    # flying north with the hill to the east: right of the track
    assert text(browser, "probe-side") == "right of track"  # a majority side is named (≥ 60 % of the power)
    off = re.match(r"(\d+) m from nadir", text(browser, "probe-offnadir"))
    _, _, dist = pyproj.Geod(ellps="WGS84").inv(ds["lon"].values[apex], ds["lat"].values[apex], lon, lat)
    assert off and float(off[1]) == pytest.approx(dist, abs=2.0)

    # the source is marked on the map where its UTM position falls on the relief image
    meta_map = browser.execute_script("return META.map")
    west, east, south, north = meta_map["extent"]
    mark = browser.find_element(By.CLASS_NAME, "src-mark")
    assert mark.is_displayed() and browser.find_element(By.CLASS_NAME, "ant-mark").is_displayed()
    left = float(mark.value_of_css_property("left").removesuffix("px"))
    top = float(mark.value_of_css_property("top").removesuffix("px"))
    box = browser.find_element(By.ID, "map-stage")
    width = browser.execute_script("return arguments[0].clientWidth", box)
    height = browser.execute_script("return arguments[0].clientHeight", box)
    assert left / width == pytest.approx((x / 1e3 - west) / (east - west), abs=1.0 / width)
    assert top / height == pytest.approx((north - y / 1e3) / (north - south), abs=1.0 / height)

    shot = tmp_path / "report_hill.png"
    assert browser.save_screenshot(str(shot)) and shot.stat().st_size > 10_000

    # clicking pins the readout: moving away leaves it on the hill; Esc releases it
    ActionChains(browser).click().perform()
    assert "pinned" in browser.find_element(By.ID, "probe").get_attribute("class")
    move_to_cell(browser, stage, 2, 10)
    assert text(browser, "probe-trace") == str(apex) and text(browser, "probe-sample") == str(sample)
    assert text(browser, "probe-side") == "right of track"
    ActionChains(browser).send_keys(Keys.ESCAPE).perform()
    assert "pinned" not in browser.find_element(By.ID, "probe").get_attribute("class")
    move_to_cell(browser, stage, 3, 10)
    assert text(browser, "probe-trace") == "3" and text(browser, "probe-sample") == "10"
    assert not [e for e in browser.get_log("browser") if e["level"] == "SEVERE"]


def test_the_side_view_the_depth_axis_and_the_parameters_render(page, browser):
    from cluttersim.io.radargram import open_radargram

    run, report = page
    browser.get(report.resolve().as_uri())
    WebDriverWait(browser, 60).until(lambda d: d.execute_script("return document.body.dataset.ready") == "1")
    # depth 0 of the right-hand axis: the median nadir delay, (nadir − window start)/Δt samples down
    ds = open_radargram(run / "radargram.nc")
    dt = float(ds["delay"].values[1])
    zero = float(np.median(ds["nadir_delay"].values - ds["window_start"].values)) / dt + 0.5
    tick = next(t for t in browser.find_elements(By.CSS_SELECTOR, "#axis-right .tick") if t.text == "0")
    assert float(tick.get_attribute("style").split("top:")[1].split("%")[0]) == pytest.approx(100 * zero / ds.sizes["sample"], abs=0.01)
    # 100 m deeper in ice lies 2·100·√ε′/c later (common practice)
    tick = next(t for t in browser.find_elements(By.CSS_SELECTOR, "#axis-right .tick") if t.text == "100")
    deeper = zero + 2 * 100.0 * math.sqrt(ICE) / C / dt
    assert float(tick.get_attribute("style").split("top:")[1].split("%")[0]) == pytest.approx(100 * deeper / ds.sizes["sample"], abs=0.01)
    browser.find_element(By.CSS_SELECTOR, '#view-switch button[data-view="sides"]').click()
    assert browser.execute_script("return document.getElementById('rg-image').naturalWidth") == NTRACE
    legend = text(browser, "rg-legend")
    assert "left of travel" in legend and "right of travel" in legend
    params = text(browser, "params")
    assert "bandwidth_hz" in params and "hagfors" in params
    assert len(browser.find_elements(By.CSS_SELECTOR, "#cautions li")) >= 5


def test_a_candidate_row_pins_its_echo(tmp_path_factory, browser):
    comparison_dir = make_comparison(tmp_path_factory.mktemp("browser-cmp"))
    out = write_report(comparison_dir, comparison_dir / "page.html")
    browser.get(out.resolve().as_uri())
    WebDriverWait(browser, 60).until(lambda d: d.execute_script("return document.body.dataset.ready") == "1")
    assert browser.find_element(By.CSS_SELECTOR, '#view-switch button[aria-selected="true"]').text == "observed"
    rows = (comparison_dir / "candidates.csv").read_text().splitlines()
    header, first = rows[0].split(","), rows[1].split(",")
    trace = first[header.index("trace")]
    # sorting by trace (descending after two clicks) puts the largest trace first
    th = browser.find_element(By.CSS_SELECTOR, '#candidates th[data-key="trace"]')
    th.click()
    th.click()
    traces = [int(r.find_elements(By.TAG_NAME, "td")[1].text) for r in browser.find_elements(By.CSS_SELECTOR, "#candidates tbody tr")]
    assert traces == sorted(traces, reverse=True) and len(traces) == len(rows) - 1
    browser.find_element(By.CSS_SELECTOR, '#candidates th[data-key="rank"]').click()
    browser.find_element(By.CSS_SELECTOR, "#candidates tbody tr").click()
    assert "pinned" in browser.find_element(By.ID, "probe").get_attribute("class")
    assert text(browser, "probe-trace") == trace
    assert "detected, unexplained" in text(browser, "probe-compare")


def test_report_colours_match_the_figures_and_the_readout_gives_shares_and_centres(tmp_path, browser):
    """The side colours the page shows are the palette's (the PNGs' too: tests/test_visual_language.py);
    pointing shows the shares, names a side only with a majority, and marks each side's centre."""
    from cluttersim import palette
    from cluttersim.io.radargram import open_radargram

    run = dome_run(tmp_path)
    report = write_report(run, tmp_path / "report.html")  # with the side centroids
    ds = open_radargram(run / "radargram.nc")
    browser.get(report.resolve().as_uri())
    WebDriverWait(browser, 60).until(lambda d: d.execute_script("return document.body.dataset.ready") == "1")
    browser.find_element(By.CSS_SELECTOR, '#view-switch button[data-view="sides"]').click()

    def css_rgb(element, prop):
        return tuple(int(v) for v in re.findall(r"\d+", element.value_of_css_property(prop))[:3])

    for side in ("left", "right", "nadir"):
        swatch = browser.find_element(By.CSS_SELECTOR, f'#rg-legend .sw[data-side="{side}"]')
        assert css_rgb(swatch, "background-color") == palette.rgb255(palette.SIDES[side])

    # the hill's echo at the apex: right of the track, its right-side centre on the hill
    apex = NTRACE // 2
    dt = float(ds["delay"].values[1])
    sample = round((2 * dome_range_m(ALT_M, 0.0) / C - float(ds["window_start"][apex])) / dt)
    stage = browser.find_element(By.ID, "rg-stage")
    move_to_cell(browser, stage, apex, sample)
    assert text(browser, "probe-side") == "right of track"
    shares = text(browser, "probe-shares")
    assert re.search(r"left \d+ % .*· right \d+ % .*· nadir strip \d+ %", shares), shares
    assert "centre" in shares and "from nadir" in shares
    right_share = browser.find_element(By.CSS_SELECTOR, '#probe-shares .share[data-side="right"]')
    assert css_rgb(right_share, "color") == palette.rgb255(palette.text_shade(palette.SIDE_RIGHT, 0.55))
    mark = browser.find_element(By.CSS_SELECTOR, ".c-mark.side-right-mark")
    assert mark.is_displayed()
    assert css_rgb(mark, "background-color") == palette.rgb255(palette.SIDE_RIGHT)
    # the right side's centre lies on the hill: within the cap's radius of its top (geometry of the scene)
    meta_map = browser.execute_script("return META.map")
    west, east, south, north = meta_map["extent"]
    box = browser.find_element(By.ID, "map-stage")
    width = browser.execute_script("return arguments[0].clientWidth", box)
    height = browser.execute_script("return arguments[0].clientHeight", box)
    left = float(mark.value_of_css_property("left").removesuffix("px")) / width
    top = float(mark.value_of_css_property("top").removesuffix("px")) / height
    x_km, y_km = west + left * (east - west), north - top * (north - south)
    hill_x_km, hill_y_km = (UTM_X0_M + DOME_EAST_M) / 1e3, UTM_Y0_M / 1e3
    assert math.hypot(x_km - hill_x_km, y_km - hill_y_km) * 1e3 < DOME_RADIUS_M

    # a mixed echo: no side word, only the shares
    left, right = ds["left_fraction"].values, ds["right_fraction"].values
    nadir = 1 - left - right
    mixed = np.isfinite(left) & (np.maximum(np.maximum(left, right), nadir) < 0.55) & (ds["power"].values > 0)
    t, k = np.argwhere(mixed)[len(np.argwhere(mixed)) // 2]
    move_to_cell(browser, stage, int(t), int(k))
    assert text(browser, "probe-side").startswith("mixed")
    shot = tmp_path / "report_sides.png"
    assert browser.save_screenshot(str(shot)) and shot.stat().st_size > 10_000
    assert not [e for e in browser.get_log("browser") if e["level"] == "SEVERE"]
