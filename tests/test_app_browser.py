"""The app in real headless Chromium: page ready with every point, keyboard confirm and undo written
to the project file, class names shown as text, the layout at 1000 and 1400 px, Enter during a pick,
the keys coming back to the page after typing a class name, a ninth class's own shape. Screenshots
go to artifacts/ (git-ignored)."""

from __future__ import annotations

import os
import shutil
import tempfile
import time
from pathlib import Path

import pytest

from labeler.project import Project

pytestmark = pytest.mark.browser

CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
CHROMEDRIVER = shutil.which("chromedriver") or "/usr/bin/chromedriver"
ARTIFACTS = Path(__file__).resolve().parent.parent / "artifacts"
XSS = "<img src=x onerror=alert(1)>"

# every string reaching the page that is not ours walks through shadow roots too
_ALL_TEXT_JS = """
const out = []; const imgs = [];
const walk = (node) => {
  if (node.nodeType === 3) out.push(node.textContent);
  if (node.nodeType === 1 && node.tagName === "IMG") imgs.push(node.getAttribute("src"));
  if (node.shadowRoot) walk(node.shadowRoot);
  for (const c of node.childNodes) walk(c);
};
walk(document.body);
return [out.join(" "), imgs];
"""


def _have_browser() -> bool:
    return os.path.exists(CHROMIUM) and os.path.exists(CHROMEDRIVER)


@pytest.fixture(scope="module")
def driver():
    if not _have_browser():
        if os.environ.get("CI"):
            pytest.fail(f"CI is set but Chromium ({CHROMIUM}) or chromedriver ({CHROMEDRIVER}) is "
                        "missing; install Debian's chromium and chromium-driver")
        pytest.skip("headless Chromium not installed (Debian packages chromium, chromium-driver)")
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    profile = tempfile.mkdtemp(prefix="labeler-chromium-")
    opts = webdriver.ChromeOptions()
    opts.binary_location = CHROMIUM
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic",
                "--no-first-run", "--disable-background-networking",
                "--disable-component-update", "--disable-sync", f"--user-data-dir={profile}",
                "--window-size=1400,900"):
        opts.add_argument(arg)
    d = webdriver.Chrome(service=Service(CHROMEDRIVER), options=opts)
    d.set_page_load_timeout(60)
    yield d
    d.quit()
    shutil.rmtree(profile, ignore_errors=True)


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    from test_app_document import make_project

    from labeler.app.server import AppServer

    path = make_project(tmp_path_factory.mktemp("browser"))
    srv = AppServer(path, annotator="browser").start_in_thread()
    yield srv, path
    srv.stop()


def _wait(fn, timeout=30.0, what="condition"):
    end = time.time() + timeout
    last = None
    while time.time() < end:
        try:
            last = fn()
            if last is not None and last is not False:
                return last
        except Exception as exc:  # page still loading
            last = exc
        time.sleep(0.1)
    raise AssertionError(f"timed out waiting for {what} (last: {last!r})")


def _open(driver, url):
    driver.get(url)
    driver.execute_script("window.__alerts = []; window.alert = (m) => window.__alerts.push(m);")
    return _wait(lambda: driver.execute_script(
        "const d = Bokeh.documents[0]; if (d == null || !d.is_idle) return null;"
        "const s = d.get_model_by_name('map_source'); return s == null ? null : s.get_length();"),
        60, "the map")


def _div_text(driver, name):
    return driver.execute_script(
        f"return Bokeh.documents[0].get_model_by_name('{name}').text;")


def _confirmed_line(counts_html):
    """'N of M windows confirmed' from the counts panel (the proposed column moves with each
    background refresh)."""
    import re

    return re.search(r"\d+ of \d+ windows confirmed", counts_html).group(0)


ENTER, ESCAPE = "\ue007", "\ue00c"      # WebDriver key codes (W3C WebDriver, "Keyboard actions")


def _key(driver, key):
    from selenium.webdriver.common.action_chains import ActionChains

    ActionChains(driver).send_keys(key).perform()


def test_page_shows_every_window_and_a_key_confirms_and_undoes(driver, served):
    srv, path = served
    with Project.open(path, readonly=True) as p:
        n = p.n_windows
        events_before = len(p.history())
    got = _open(driver, srv.url)
    assert got == n
    counts0 = _confirmed_line(_div_text(driver, "counts"))
    # pick a window that is not confirmed yet, as a click on the map would
    with Project.open(path, readonly=True) as p:
        confirmed = set(p.labels()["window_id"])
        ids = p.windows()["id"].tolist()
    row = next(i for i, w in enumerate(ids) if w not in confirmed)
    driver.execute_script(
        f"Bokeh.documents[0].get_model_by_name('map_source').selected.indices = [{row}];")
    _wait(lambda: "1 window" in _div_text(driver, "selection") or None, 20,
          "the pick to reach the app")
    driver.execute_script("document.activeElement && document.activeElement.blur()")  # keys: page
    _key(driver, "1")
    _wait(lambda: _confirmed_line(_div_text(driver, "counts")) != counts0 or None, 20,
          "the counts to change")

    def events():
        with Project.open(path, readonly=True) as p:
            return p.history()

    ev = _wait(lambda: (lambda e: e if len(e) == events_before + 1 else None)(events()), 20,
               "the confirm event")
    assert ev.iloc[-1]["window_id"] == ids[row] and ev.iloc[-1]["annotator"] == "browser"
    assert ev.iloc[-1]["source"] == "map"
    # drawn at once on the map's overlay, and in the map's source once the page is left alone
    _wait(lambda: driver.execute_script(_DRAWN_CF_JS, row) >= 0 or None, 20, "the map to show it")
    ARTIFACTS.mkdir(exist_ok=True)
    driver.save_screenshot(str(ARTIFACTS / "app_confirmed.png"))
    _key(driver, "u")
    ev = _wait(lambda: (lambda e: e if e.iloc[-1]["source"] == "undo" else None)(events()), 20,
               "the undo event")
    _wait(lambda: _confirmed_line(_div_text(driver, "counts")) == counts0 or None, 20,
          "the counts to return")
    assert driver.execute_script("return window.__alerts.length") == 0


def test_hostile_class_name_renders_as_text(driver, served):
    from selenium.webdriver.common.by import By

    srv, _path = served
    _open(driver, srv.url)
    driver.execute_script(
        "Bokeh.documents[0].get_model_by_name('new_class').value = arguments[0];", XSS)
    # click the add button inside its shadow root
    host = _wait(lambda: driver.execute_script(
        "const m = Bokeh.documents[0].get_model_by_name('add_class');"
        "return Bokeh.index.get_one(m).el;"), 20, "the add button")
    host.shadow_root.find_element(By.CSS_SELECTOR, "button").click()
    text, imgs = _wait(lambda: (lambda r: r if XSS in r[0] else None)(
        driver.execute_script(_ALL_TEXT_JS)), 20, "the new class on the page")
    assert "x" not in imgs                       # no <img src=x> element was made
    time.sleep(0.5)
    assert driver.execute_script("return window.__alerts.length") == 0
    ARTIFACTS.mkdir(exist_ok=True)
    driver.save_screenshot(str(ARTIFACTS / "app_class_name_as_text.png"))


def test_map_is_drawn_the_way_the_address_says(driver, served):
    """?draw=webgl forces WebGL; an address without it is drawn on a canvas at once unless the
    browser's WebGL runs on a GPU (the page then asks again with ?draw=webgl before loading
    BokehJS); the browser's choice is kept in a cookie the server reads, so the next address
    without ?draw= goes straight to it; the header names what the map is drawn with."""
    srv, _path = served
    _open(driver, srv.url + "?draw=webgl")
    assert driver.current_url.endswith("?draw=webgl")
    assert "drawn with WebGL" in _div_text(driver, "header")
    driver.delete_all_cookies()
    _open(driver, srv.url)
    _wait(lambda: _div_text(driver, "header"), 20, "the header")
    header = _div_text(driver, "header")
    chosen = driver.get_cookie("labeler_draw")["value"]
    if chosen == "canvas":
        assert driver.current_url == srv.url and "drawn with canvas" in header
    else:
        assert chosen == "webgl" and driver.current_url.endswith("?draw=webgl")
        assert "drawn with WebGL" in header
    try:
        for kept, said in (("webgl", "drawn with WebGL"), ("canvas", "drawn with canvas")):
            driver.add_cookie({"name": "labeler_draw", "value": kept, "path": "/"})
            _open(driver, srv.url)
            assert driver.current_url == srv.url and said in _div_text(driver, "header")
    finally:
        driver.add_cookie({"name": "labeler_draw", "value": chosen, "path": "/"})


def test_review_queue_item_confirmed_with_a_key_then_undone(driver, served):
    srv, path = served
    with Project.open(path, readonly=True) as p:
        events_before = len(p.history())
    _open(driver, srv.url)
    counts0 = _confirmed_line(_div_text(driver, "counts"))
    driver.execute_script("document.activeElement && document.activeElement.blur()")  # keys: page
    _key(driver, "r")
    item = _wait(lambda: (lambda t: t if "Review 1 of" in t else None)(
        _div_text(driver, "queue_item")), 20, "the first queue item")
    pos = 1
    while "why: confirmed" in item:          # a confirmed window (a conflict): skip it with S
        _key(driver, "s")
        pos += 1
        item = _wait(lambda: (lambda t: t if f"Review {pos} of" in t else None)(
            _div_text(driver, "queue_item")), 20, "the next queue item")
    wid = int(item.split("window ")[1].split(" ")[0])
    _key(driver, "1")
    _wait(lambda: f"Review {pos + 1} of" in _div_text(driver, "queue_item") or None, 20,
          "the queue to move on")
    _wait(lambda: _confirmed_line(_div_text(driver, "counts")) != counts0 or None, 20,
          "the counts to change")
    with Project.open(path, readonly=True) as p:
        ev = p.history()
    assert len(ev) == events_before + 1
    assert ev.iloc[-1]["window_id"] == wid and ev.iloc[-1]["source"] == "queue"
    ARTIFACTS.mkdir(exist_ok=True)
    driver.save_screenshot(str(ARTIFACTS / "app_queue_confirmed.png"))
    _key(driver, "u")
    _wait(lambda: _confirmed_line(_div_text(driver, "counts")) == counts0 or None, 20,
          "the counts to return")


# the class a window is drawn with on the map: the overlay of windows labeled since the last pause
# first, then the map's source (-1: none)
_DRAWN_CF_JS = """
const d = Bokeh.documents[0]; const row = arguments[0];
const f = d.get_model_by_name('fresh_source');
const k = Array.from(f.data.row).indexOf(row);
return k >= 0 ? f.data.cf[k] : d.get_model_by_name('map_source').data.cf[row];
"""


def _box(driver, name):
    """(left, top, width, height) of a model's element in the page."""
    return driver.execute_script(
        "const m = Bokeh.documents[0].get_model_by_name(arguments[0]);"
        "const r = Bokeh.index.get_one(m).el.getBoundingClientRect();"
        "return [r.left, r.top, r.width, r.height];", name)


def _height(driver, name):
    """Height of a model's element in the page; 0 when the model is not in the page (yet)."""
    return driver.execute_script(
        "const m = Bokeh.documents[0].get_model_by_name(arguments[0]);"
        "const v = m == null ? null : Bokeh.index.get_one(m);"
        "return v == null ? 0 : v.el.getBoundingClientRect().height;", name)


def test_layout_fits_the_window(driver, served):
    """At 1400x900 the map and the signal are seen together, side panel beside them; at 1000 px the
    side panel moves under them and nothing scrolls sideways."""
    srv, _path = served
    ARTIFACTS.mkdir(exist_ok=True)
    try:
        driver.set_window_size(1400, 900)
        _open(driver, srv.url)
        _wait(lambda: _box(driver, "signal_box")[3] > 100 or None, 20, "the signal panel")
        inner_w, inner_h, scroll_w = driver.execute_script(
            "return [window.innerWidth, window.innerHeight, document.documentElement.scrollWidth]")
        sig, side, mp = _box(driver, "signal_box"), _box(driver, "side"), _box(driver, "map")
        assert sig[1] + sig[3] <= inner_h, (sig, inner_h)       # signal in the first viewport
        # nothing picked: no empty gallery; what to do next, and where things stand in sight
        assert _height(driver, "gallery") == 0
        assert "Next" in _div_text(driver, "selection")
        for name in ("counts", "estimate", "queue_item"):
            box = _box(driver, name)
            assert box[3] > 0 and box[1] + box[3] <= inner_h, (name, box, inner_h)
        assert mp[1] >= 0 and mp[3] >= 300
        assert side[0] >= mp[0] + mp[2] - 1 and side[1] < sig[1]  # beside, not under
        assert scroll_w <= inner_w
        driver.save_screenshot(str(ARTIFACTS / "app_1400x900.png"))
        driver.set_window_size(1000, 800)
        _wait(lambda: _box(driver, "side")[1] > _box(driver, "map")[1] + 200 or None, 20,
              "the side panel to move under the map")
        inner_w, scroll_w = driver.execute_script(
            "return [window.innerWidth, document.documentElement.scrollWidth]")
        assert scroll_w <= inner_w, (scroll_w, inner_w)
        driver.save_screenshot(str(ARTIFACTS / "app_1000.png"))
    finally:
        driver.set_window_size(1400, 900)


def test_enter_during_a_pick_acts_on_the_pick(driver, served):
    """With a review item shown, a pick on the map pauses the review; Enter confirms the pick's
    proposal for the picked windows (not the review item); Esc comes back to the item."""
    srv, path = served
    _open(driver, srv.url)
    _wait(lambda: "up to date" in _div_text(driver, "progress") or None, 60, "the proposals")
    driver.execute_script("document.activeElement && document.activeElement.blur()")
    _key(driver, "r")
    item = _wait(lambda: (lambda t: t if "Review 1 of" in t else None)(
        _div_text(driver, "queue_item")), 20, "the first queue item")
    item_id = int(item.split("window ")[1].split(" ")[0])
    with Project.open(path, readonly=True) as p:
        prop = p.proposals()
        ids = p.windows()["id"].tolist()
        labeled = set(p.labels()["window_id"])
        events_before = len(p.history())
    free = prop[~prop["window_id"].isin(labeled) & (prop["window_id"] != item_id)]
    label = free["label"].value_counts().index[0]
    want = free[free["label"] == label]["window_id"].head(4).tolist()
    rows = [ids.index(w) for w in want]
    driver.execute_script(
        "Bokeh.documents[0].get_model_by_name('map_source').selected.indices = arguments[0];",
        rows)
    _wait(lambda: "paused" in _div_text(driver, "queue_item") or None, 20, "the review to pause")
    _key(driver, ENTER)

    def events():
        with Project.open(path, readonly=True) as p:
            return p.history()

    ev = _wait(lambda: (lambda e: e if len(e) >= events_before + len(want) else None)(events()),
               20, "the pick's confirm")
    new = ev.iloc[events_before:]
    assert sorted(new["window_id"]) == sorted(want) and set(new["class"]) == {label}
    assert set(new["source"]) == {"map"} and item_id not in set(new["window_id"])
    _wait(lambda: f"{len(want)} windows → " in _div_text(driver, "message") or None, 20,
          "the feedback line")
    driver.save_screenshot(str(ARTIFACTS / "app_pick_confirmed.png"))
    _key(driver, ESCAPE)
    _wait(lambda: "paused" not in _div_text(driver, "queue_item") or None, 20,
          "the review item back")
    _key(driver, "u")
    _wait(lambda: len(events()) == events_before + 2 * len(want) or None, 20, "the undo")


def test_keys_come_back_to_the_page_after_typing_a_class(driver, served):
    from selenium.webdriver.common.by import By

    srv, _path = served
    _open(driver, srv.url)
    host = _wait(lambda: driver.execute_script(
        "const m = Bokeh.documents[0].get_model_by_name('new_class');"
        "return Bokeh.index.get_one(m).el;"), 20, "the class box")
    box = host.shadow_root.find_element(By.CSS_SELECTOR, "input")
    box.click()
    box.send_keys("resting", ENTER)
    _wait(lambda: "resting" in _div_text(driver, "class_pad") or None, 20, "the new class")
    _key(driver, "1")                                  # nothing picked: the app says so
    _wait(lambda: "nothing selected" in _div_text(driver, "message") or None, 20,
          "the key to reach the app")
    assert box.get_attribute("value") == ""


def test_a_ninth_class_takes_another_shape(driver, served):
    srv, _path = served
    _open(driver, srv.url)
    shapes = driver.execute_script(
        "const m = Bokeh.documents[0].get_model_by_name('map');"
        "const r = m.renderers.find((r) => r.data_source.name === 'map_source');"
        "return Array.from(r.glyph.marker.transform.v_compute([0, 7, 8, 15, 16, -1]));")
    assert shapes[0] == shapes[1] == "circle" and shapes[-1] == "circle"
    assert shapes[2] == shapes[3] != "circle" and shapes[4] not in ("circle", shapes[2])


def _click_in(driver, name, css):
    """A real click on an element inside a Div's shadow root."""
    from selenium.webdriver.common.by import By

    host = _wait(lambda: driver.execute_script(
        "const m = Bokeh.documents[0].get_model_by_name(arguments[0]);"
        "return Bokeh.index.get_one(m).el;", name), 20, f"the {name} panel")
    # tried again while something else is over the element at that moment (the page still
    # scrolling or laying out after the click before): the click is made once it lands
    _wait(lambda: host.shadow_root.find_element(By.CSS_SELECTOR, css).click() or True, 20,
          f"a click on {css} in {name}")


def test_between_and_not_sure_answer_the_review_item(driver, served):
    """The slip's 'between activities' button and the N key answer the review item: written to the
    file with the answer's class and source queue, the review moves on, the feedback line says it;
    U takes each back."""
    srv, path = served
    with Project.open(path, readonly=True) as p:
        labeled = set(p.labels()["window_id"])
        events_before = len(p.history())
    _open(driver, srv.url)
    driver.execute_script("document.activeElement && document.activeElement.blur()")
    _key(driver, "r")
    pos = 1
    item = _wait(lambda: (lambda t: t if "Review 1 of" in t else None)(
        _div_text(driver, "queue_item")), 20, "the first queue item")
    wid = int(item.split("window ")[1].split(" ")[0])
    while wid in labeled:                   # an answer to a window nobody labeled
        _key(driver, "s")
        pos += 1
        item = _wait(lambda: (lambda t: t if f"Review {pos} of" in t else None)(
            _div_text(driver, "queue_item")), 20, "the next queue item")
        wid = int(item.split("window ")[1].split(" ")[0])
    _click_in(driver, "queue_item", "button[data-cmd='answer:between']")

    def last_events(k):
        with Project.open(path, readonly=True) as p:
            ev = p.history()
        return ev.iloc[events_before:] if len(ev) >= events_before + k else None

    new = _wait(lambda: last_events(1), 20, "the answer in the file")
    assert new.iloc[-1]["window_id"] == wid and new.iloc[-1]["class"] == "(mixed)"
    assert new.iloc[-1]["source"] == "queue"
    _wait(lambda: "between activities" in _div_text(driver, "message") or None, 20,
          "the feedback line")
    item = _wait(lambda: (lambda t: t if f"Review {pos + 1} of" in t else None)(
        _div_text(driver, "queue_item")), 20, "the review to move on")
    nxt = int(item.split("window ")[1].split(" ")[0])
    _key(driver, "n")
    new = _wait(lambda: last_events(2), 20, "the second answer in the file")
    assert new.iloc[-1]["window_id"] == nxt and new.iloc[-1]["class"] == "(not sure)"
    _wait(lambda: "not sure" in _div_text(driver, "message") or None, 20, "the feedback line")
    ARTIFACTS.mkdir(exist_ok=True)
    driver.save_screenshot(str(ARTIFACTS / "app_answered.png"))
    _key(driver, "u")
    _wait(lambda: last_events(3), 20, "the first undo")
    _key(driver, "u")
    _wait(lambda: last_events(4), 20, "the second undo")
    with Project.open(path, readonly=True) as p:
        assert not ({wid, nxt} & set(p.labels()["window_id"]))


def test_opened_class_drawer_comes_into_sight(driver, served):
    srv, _path = served
    _open(driver, srv.url)
    inner_h = driver.execute_script("return window.innerHeight")
    _click_in(driver, "drawer_toggle", "button")
    _wait(lambda: (lambda b: b if b[3] > 0 and b[1] >= 0 and b[1] + b[3] <= inner_h + 1
                   else None)(_box(driver, "class_drawer")), 20, "the drawer in sight")
    _click_in(driver, "drawer_toggle", "button")          # folded again
    _wait(lambda: _box(driver, "class_drawer")[3] == 0 or None, 20, "the drawer folded")
    _click_in(driver, "drawer_toggle", "button")          # opened again: the same drawer
    _wait(lambda: _box(driver, "class_drawer")[3] > 0 or None, 20, "the drawer again")
    assert driver.execute_script(
        "return Bokeh.documents[0].get_model_by_name('manage_class').options.length") >= 2


def test_gallery_shows_for_a_pick_of_several_windows_only(driver, served):
    srv, _path = served
    _open(driver, srv.url)
    assert _height(driver, "gallery") == 0
    driver.execute_script(
        "Bokeh.documents[0].get_model_by_name('map_source').selected.indices = [3, 9, 20, 41];")
    _wait(lambda: _box(driver, "gallery")[3] > 100 or None, 20, "the gallery")
    driver.execute_script("document.activeElement && document.activeElement.blur()")
    _key(driver, ESCAPE)
    _wait(lambda: _box(driver, "gallery")[3] == 0 or None, 20, "the gallery to go")
    driver.execute_script(                                 # and back for the next pick
        "Bokeh.documents[0].get_model_by_name('map_source').selected.indices = [5, 11, 30];")
    _wait(lambda: _box(driver, "gallery")[3] > 100 or None, 20, "the gallery again")


def _drag(driver, x0, y0, x1, y1):
    """A real drag of the mouse across the page, as a person draws a box."""
    from selenium.webdriver.common.actions.action_builder import ActionBuilder

    ab = ActionBuilder(driver, duration=20)
    ab.pointer_action.move_to_location(int(x0), int(y0)).pointer_down()
    for k in (2, 3):
        ab.pointer_action.move_to_location(int(x0 + (x1 - x0) * k / 3),
                                           int(y0 + (y1 - y0) * k / 3))
    ab.pointer_action.pointer_up()
    ab.perform()


def test_a_dragged_box_picks_its_windows_and_a_key_recolours_them_at_once(driver, served):
    """A box dragged on the map picks exactly the windows drawn inside it (counted here from the
    page's own coordinates and scales), rings them and names them; a class key draws them in the
    class's colour at once; the map's source takes the change with the new proposals, after a
    pause; the points are not repainted for the pick (no selection of the map's source)."""
    import numpy as np

    srv, path = served
    _open(driver, srv.url)
    driver.execute_script("document.activeElement && document.activeElement.blur()")
    geo = driver.execute_script("""
        const d = Bokeh.documents[0]; const s = d.get_model_by_name('map_source');
        const v = Bokeh.index.get_one(d.get_model_by_name('map'));
        const r = v.canvas_view.el.getBoundingClientRect(); const f = v.frame;
        const sx = Array.from(s.data.x, (x) => f.x_scale.compute(x) + r.left);
        const sy = Array.from(s.data.y, (y) => f.y_scale.compute(y) + r.top);
        return [sx, sy, Array.from(s.data.cf), r.left + f.bbox.left, r.top + f.bbox.top,
                r.left + f.bbox.right, r.top + f.bbox.bottom];""")
    sx, sy, cf = np.asarray(geo[0]), np.asarray(geo[1]), np.asarray(geo[2])
    left, top, right, bottom = geo[3:]
    # a box around an unconfirmed window, well inside the frame, holding a few windows
    inside = (sx > left + 40) & (sx < right - 40) & (sy > top + 40) & (sy < bottom - 40)
    r = int(np.flatnonzero(inside & (cf < 0))[0])
    x0, y0, x1, y1 = sx[r] - 12, sy[r] - 12, sx[r] + 12, sy[r] + 12
    _drag(driver, x0, y0, x1, y1)
    want = set(np.flatnonzero((sx >= x0) & (sx <= x1) & (sy >= y0) & (sy <= y1)).tolist())
    assert r in want
    _wait(lambda: f"{len(want)} window" in _div_text(driver, "selection") or None, 20,
          "the pick named in the side panel")
    rings = set(driver.execute_script(
        "return Array.from(Bokeh.documents[0].get_model_by_name('pick_source').data.row)"))
    # pixel edges may round either way: the rings are the windows within the drawn box
    assert rings == want, (sorted(rings ^ want))
    assert driver.execute_script(
        "return Bokeh.documents[0].get_model_by_name('map_source').selected.indices.length") == 0
    code = int(__import__("re").search(r"data-cmd='class:(\d+)' name='class_1'",
                                       _div_text(driver, "class_pad")).group(1))
    _key(driver, "1")
    _wait(lambda: all(driver.execute_script(_DRAWN_CF_JS, k) == code for k in want) or None, 20,
          "the picked windows drawn in the class's colour")
    # left alone, the map's source takes them and the overlay empties
    _wait(lambda: driver.execute_script(
        "const d = Bokeh.documents[0]; const rows = arguments[0];"
        "const cf = d.get_model_by_name('map_source').data.cf;"
        "return d.get_model_by_name('fresh_source').get_length() === 0"
        " && rows.every((k) => cf[k] === arguments[1]);", sorted(want), code) or None, 90,
        "the map's source to take the change with the new proposals")
    ARTIFACTS.mkdir(exist_ok=True)
    driver.save_screenshot(str(ARTIFACTS / "app_box_picked.png"))
    _key(driver, "u")
    with Project.open(path, readonly=True) as p:
        picked = set(p.windows()["id"].to_numpy()[sorted(want)].tolist())

    def still_labeled():
        with Project.open(path, readonly=True) as p:
            return picked & set(p.labels()["window_id"].tolist())

    _wait(lambda: not still_labeled() or None, 20, "the undo in the file")


def test_the_page_loads_the_bundles_it_uses_and_a_side_panel_change_leaves_the_map_alone(
        driver, served):
    """The page loads BokehJS and its widgets, not the mathematics and tables bundles; the side
    panel is a root of its own, so a side-panel text that grows by several lines lays out the side
    panel alone: the map is not painted again."""
    srv, _path = served
    _open(driver, srv.url)
    scripts = driver.execute_script(
        "return Array.from(document.scripts).map((s) => s.src).filter((s) => s);")
    names = {s.split("/")[-1].split("?")[0] for s in scripts}
    assert {"bokeh.min.js", "bokeh-widgets.min.js"} <= names, names
    assert not names & {"bokeh-mathjax.min.js", "bokeh-tables.min.js"}, names
    roots = driver.execute_script("return Bokeh.documents[0].roots().map((r) => r.name);")
    assert roots == ["labeler_root", "map_and_signal", "side_root", "labeler_bottom"], roots
    side_h = _box(driver, "side")[3]
    painted = driver.execute_async_script("""
        const done = arguments[arguments.length - 1];
        const d = Bokeh.documents[0];
        const v = Bokeh.index.get_one(d.get_model_by_name('map'));
        let n = 0; const paint = v.paint;
        v.paint = function (...a) { n += 1; return paint.apply(this, a); };
        d.get_model_by_name('message').text = '<p>one</p><p>two</p><p>three</p><p>four</p>';
        setTimeout(() => requestAnimationFrame(() => { v.paint = paint; done(n); }), 800);""")
    assert _box(driver, "side")[3] > side_h + 40        # the side panel did grow
    assert painted == 0, painted
