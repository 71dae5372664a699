"""The phone page in a real browser: headless Chromium (Debian's) driven by Selenium, against
`taprigd run` on the simulated test piece, as an operator walking round the panel would use it.

Pairing, arming, taps (clean, double, completing a point), the plots, the grid, moving on;
automatic accept; a Wi-Fi drop (a relay that cuts every connection) and an answer lost on
the way back (the command is retried with its request id and acts once). Screenshots go to
the test's temporary folder. What the page draws is checked against what the rig serves
(/v1/hits/last), and the pixels of each plot are counted in the canvas itself.
"""

from __future__ import annotations

import contextlib
import json
import math
import urllib.request
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from selenium.webdriver.common.by import By
from selenium.webdriver.remote.webdriver import WebDriver

from .harness import Taprigd, phone, taprigd, wait
from .lossy_proxy import LossyProxy

FORCE = "#243447"  # phone.js FORCE_COLOUR
FIRST = "#1f5fa8"  # plot.js COLOURS[0]: the first response channel
SECOND = "#c2410c"  # plot.js COLOURS[1]: drawn over the first where they agree

COUNT_PIXELS = """
const [id, hex] = arguments;
const c = document.getElementById(id);
const px = c.getContext("2d").getImageData(0, 0, c.width, c.height).data;
const want = [1, 3, 5].map((i) => parseInt(hex.slice(i, i + 2), 16));
let n = 0;
for (let i = 0; i < px.length; i += 4) {
  if (px[i] === want[0] && px[i + 1] === want[1] && px[i + 2] === want[2] && px[i + 3] === 255) n++;
}
return n;
"""


# Every control a thumb may need, as (what, width, height) in CSS pixels.
CONTROLS = """
return [...document.querySelectorAll("button, input, #grid .pt")]
  .filter((e) => e.getClientRects().length && !e.closest("[hidden]"))
  .map((e) => { const r = e.getBoundingClientRect();
                return [e.id || e.dataset.label || e.textContent.trim(), r.width, r.height]; });
"""
# (what, text colour, background colour) of the page's words, the background being that of
# the nearest element that paints one.
COLOURS_SEEN = """
const ground = (e) => {
  for (; e; e = e.parentElement) {
    const c = getComputedStyle(e).backgroundColor;
    if (c !== "rgba(0, 0, 0, 0)" && c !== "transparent") return c;
  }
  return "rgb(255, 255, 255)";
};
return [...document.querySelectorAll(arguments[0])]
  .filter((e) => e.getClientRects().length && !e.disabled && e.textContent.trim())
  .map((e) => [e.id || e.textContent.trim(), getComputedStyle(e).color, ground(e)]);
"""
WORDS = (
    "#point, #avg-text, #verdict-title, #verdict-detail, figcaption, button, .chip, "
    "#h-stream, #device-alert, #finished h2, #finished p"
)


def luminance(css: str) -> float:
    """Relative luminance of an sRGB colour "rgb(r, g, b)" (WCAG 2.1, definitions)."""
    r, g, b = (int(v) / 255 for v in css[css.index("(") + 1 : css.index(")")].split(",")[:3])

    def linear(c: float) -> float:
        return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4

    return 0.2126 * linear(r) + 0.7152 * linear(g) + 0.0722 * linear(b)


def contrast(fg: str, bg: str) -> float:
    """(L1 + 0.05) / (L2 + 0.05), the lighter over the darker (WCAG 2.1, "contrast ratio")."""
    hi, lo = sorted((luminance(fg), luminance(bg)), reverse=True)
    return (hi + 0.05) / (lo + 0.05)


def check_legible_and_thumb_sized(d: WebDriver) -> None:
    """Words at least 7:1 against their ground, the enhanced level of WCAG 2.1 SC 1.4.6 (W3C,
    Web Content Accessibility Guidelines 2.1, 2018), for a screen in a bright workshop; every
    control at least 48 × 48 CSS px (common practice for touch targets; WCAG 2.1 SC 2.5.5
    asks 44); nothing wider than the phone held upright."""
    seen = d.execute_script(COLOURS_SEEN, WORDS)
    assert len(seen) > 10
    for what, fg, bg in seen:
        assert contrast(fg, bg) >= 7.0, (what, fg, bg, contrast(fg, bg))
    controls = d.execute_script(CONTROLS)
    assert len(controls) > 10
    for what, w, h in controls:
        assert w >= 48 and h >= 48, (what, w, h)
    assert d.execute_script("return document.documentElement.scrollWidth <= innerWidth")


def test_contrast_ratio_matches_the_published_extremes() -> None:
    """Black on white is 21:1 and a colour on itself 1:1 (WCAG 2.1, "contrast ratio" note)."""
    assert contrast("rgb(0, 0, 0)", "rgb(255, 255, 255)") == 21.0
    assert contrast("rgb(118, 118, 118)", "rgb(118, 118, 118)") == 1.0
    # #767676 on white: the lightest grey commonly quoted as passing 4.5:1 (from memory: 4.54).
    assert 4.5 < contrast("rgb(118, 118, 118)", "rgb(255, 255, 255)") < 4.6


# Draw a grid with the page's own module into a detached SVG; the circles' centres back.
DRAW_GRID = """
const [points, done] = arguments;
import("/web/grid.js").then(({ drawGrid }) => {
  const svg = document.createElementNS("http://www.w3.org/2000/svg", "svg");
  drawGrid(svg, points, () => "todo", points[0].label, null);
  done([...svg.querySelectorAll("g")].map((g) => {
    const c = g.querySelectorAll("circle")[1];
    return [g.dataset.label, Number(c.getAttribute("cx")), Number(c.getAttribute("cy"))];
  }));
});
"""


def text(d: WebDriver, element_id: str) -> str:
    """The element's text as written (WebDriver's .text would apply CSS text-transform)."""
    return str(d.find_element(By.ID, element_id).get_attribute("textContent")).strip()


def click(d: WebDriver, element_id: str) -> None:
    d.find_element(By.ID, element_id).click()


def data(d: WebDriver, element_id: str, key: str) -> str | None:
    value = d.find_element(By.ID, element_id).get_attribute(f"data-{key}")
    return None if value is None else str(value)


def pixels(d: WebDriver, canvas_id: str, colour: str) -> int:
    """Device pixels of exactly `colour` in the canvas (its data lines, not its rules)."""
    return int(d.execute_script(COUNT_PIXELS, canvas_id, colour))


def shot(d: WebDriver, path: Path) -> None:
    assert d.save_screenshot(str(path)), path
    assert path.stat().st_size > 10_000


def last_hit(rig: Taprigd) -> dict[str, Any]:
    req = urllib.request.Request(f"{rig.base}/v1/hits/last")
    req.add_header("Authorization", f"Bearer {rig.token}")
    with urllib.request.urlopen(req, timeout=5) as resp:
        return json.loads(resp.read())  # type: ignore[no-any-return]


def state(rig: Taprigd) -> dict[str, Any]:
    req = urllib.request.Request(f"{rig.base}/v1/state")
    req.add_header("Authorization", f"Bearer {rig.token}")
    with urllib.request.urlopen(req, timeout=5) as resp:
        return json.loads(resp.read())  # type: ignore[no-any-return]


def pair(d: WebDriver, base: str, token: str) -> str:
    """Open the pairing address as a phone camera would; the current point once live."""
    d.get(f"{base}/pair#token={token}")
    wait(d, "a live event stream", lambda d: text(d, "link-chip") == "live")
    return str(wait(d, "the current point", lambda d: text(d, "point").strip("–") or None))


def verdict(d: WebDriver) -> str:
    return text(d, "verdict-title")


@contextlib.contextmanager
def relay(port: int) -> Iterator[LossyProxy]:
    proxy = LossyProxy(port).start()
    try:
        yield proxy
    finally:
        proxy.close()


def test_pair_tap_reject_complete_and_move_on(tmp_path: Path) -> None:
    """Operator accept: the whole walk round one point and on to the next."""
    with (
        taprigd(tmp_path, "capture.accept=operator", "capture.averages=2") as rig,
        phone(tmp_path) as d,
    ):
        point = pair(d, rig.base, rig.token)
        # Pairing kept the token and wiped it from the address bar.
        assert d.current_url == f"{rig.base}/pair"
        assert d.execute_script("return localStorage.getItem('taprig.token')") == rig.token
        assert point == "A1" and text(d, "test-button") == "shop-panel"
        assert d.find_element(By.ID, "decide").is_displayed()
        click(d, "arm")  # taprigd run arms the test it opens: this disarms
        wait(d, "the rig disarmed", lambda d: text(d, "armed") == "not armed")
        click(d, "arm")
        wait(d, "the rig armed", lambda d: text(d, "armed") == "armed")
        assert state(rig)["session"]["armed"] is True
        click(d, "sound")  # chimes from here on: any error in them would reach the console
        assert d.find_element(By.ID, "sound").get_attribute("aria-pressed") == "true"
        shot(d, tmp_path / "1-paired.png")
        check_legible_and_thumb_sized(d)

        # A clean tap is held for the operator; its force and response are drawn at once.
        rig.tap(point)
        wait(d, "the tap held for a decision", lambda d: verdict(d) == "Keep this tap?")
        first = wait(d, "the force plot", lambda d: data(d, "plot-force", "stamp"))
        assert pixels(d, "plot-force", FORCE) > 50 and pixels(d, "plot-response", FIRST) > 50
        assert d.find_element(By.ID, "accept").is_enabled()
        check_legible_and_thumb_sized(d)
        click(d, "accept")
        wait(d, "the tap counted", lambda d: verdict(d) == "Counted 1 of 2")
        wait(d, "the FRF so far", lambda d: int(data(d, "plot-frf", "points") or 0) > 0)
        served = last_hit(rig)
        # Every positive |H1| value the rig served is on the plot (the log axis skips zeros).
        positive = sum(1 for row in served["spectra"]["h1_abs"] for v in row if v > 0)
        assert int(data(d, "plot-frf", "points") or 0) == positive
        coherent = sum(1 for row in served["spectra"]["coherence"] for v in row if math.isfinite(v))
        assert int(data(d, "plot-coherence", "points") or 0) == coherent
        assert pixels(d, "plot-frf", FIRST) > 50
        # One average: γ² = 1 on both channels, the second line over the first.
        assert pixels(d, "plot-coherence", FIRST) + pixels(d, "plot-coherence", SECOND) > 50
        assert text(d, "avg-text") == "average 1 of 2"
        shot(d, tmp_path / "2-counted.png")
        check_legible_and_thumb_sized(d)

        # A double hit is rejected, with the reason in plain words, and its record drawn.
        rig.tap(point, double_hit=True)
        wait(d, "the double hit rejected", lambda d: verdict(d) == "Double hit")
        assert "struck twice" in text(d, "verdict-detail")
        wait(d, "the double hit's record", lambda d: data(d, "plot-force", "stamp") != first)
        assert text(d, "avg-text") == "average 1 of 2"
        assert not d.find_element(By.ID, "accept").is_enabled()
        shot(d, tmp_path / "3-double-hit.png")
        check_legible_and_thumb_sized(d)

        # The second average completes the point; the rig moves on and the grid shows it.
        rig.tap(point)
        wait(d, "the tap held for a decision", lambda d: verdict(d) == "Keep this tap?")
        click(d, "accept")
        wait(d, "the point done", lambda d: verdict(d) == "A1 done")
        wait(d, "the next point", lambda d: text(d, "point") == "A2")
        wait(d, "the grid updated", lambda d: text(d, "progress-text") == "1 of 30 done")
        a1 = d.find_element(By.CSS_SELECTOR, '#grid [data-label="A1"]')
        assert "done" in (a1.get_attribute("class") or "")
        shot(d, tmp_path / "4-point-done.png")
        check_legible_and_thumb_sized(d)

        # Next moves at once when nothing would be lost...
        click(d, "next")
        wait(d, "the point after", lambda d: text(d, "point") == "A3")
        # ...but asks for a second tap before it drops averages.
        rig.tap("A3")
        wait(d, "the tap held", lambda d: verdict(d) == "Keep this tap?")
        click(d, "accept")
        wait(d, "the tap counted", lambda d: verdict(d) == "Counted 1 of 2")
        click(d, "previous")
        wait(d, "the confirmation", lambda d: "again" in text(d, "previous"))
        assert text(d, "point") == "A3" and state(rig)["session"]["point"] == "A3"
        click(d, "previous")
        wait(d, "the point before", lambda d: text(d, "point") == "A2")
        shot(d, tmp_path / "5-moved.png")
        logs = [e for e in d.get_log("browser") if e["level"] == "SEVERE"]  # type: ignore[attr-defined]
        # The only failure a console may show: the last hit asked for before any tap (404).
        assert all("/v1/hits/last" in e["message"] for e in logs), logs

    log = rig.log.read_text()
    assert '"GET /pair HTTP/1.1" 200' in log and '"GET /v1/events HTTP/1.1"' in log
    assert rig.token not in log


def test_automatic_accept_a_wifi_drop_and_a_lost_answer(tmp_path: Path) -> None:
    """Automatic accept; the stream comes back after the network does; a retry acts once."""
    with (
        taprigd(tmp_path, "capture.averages=3") as rig,
        relay(rig.port) as net,
        phone(tmp_path) as d,
    ):
        point = pair(d, f"http://127.0.0.1:{net.port}", rig.token)
        assert not d.find_element(By.ID, "decide").is_displayed()
        rig.tap(point)
        wait(d, "the tap counted without a decision", lambda d: verdict(d) == "Counted 1 of 3")
        first = data(d, "plot-force", "stamp")

        # The Wi-Fi drops; a tap lands while the phone is away; the Wi-Fi comes back.
        net.cut()
        wait(d, "the link lost", lambda d: text(d, "link-chip") != "live")
        wait(d, "the warning", lambda d: d.find_element(By.ID, "offline").is_displayed())
        shot(d, tmp_path / "1-no-link.png")
        check_legible_and_thumb_sized(d)
        rig.tap(point)
        net.restore()
        wait(d, "the link back", lambda d: text(d, "link-chip") == "live")
        wait(d, "the missed tap caught up", lambda d: text(d, "avg-text") == "average 2 of 3")
        wait(d, "the missed tap drawn", lambda d: data(d, "plot-force", "stamp") != first)
        assert text(d, "h-stream").startswith("live, reconnected")
        assert not d.find_element(By.ID, "offline").is_displayed()

        # The answer to "next" is lost after the rig acted: the page retries the same
        # request id, the rig answers from memory, and the cursor moves one point only.
        net.lose_answer("/v1/session/next")
        click(d, "next")  # drops two averages: asks first
        wait(d, "the confirmation", lambda d: "again" in text(d, "next"))
        click(d, "next")
        wait(d, "the next point", lambda d: text(d, "point") == "A2")

        def sent() -> list[bytes]:
            return [b for line, b in net.requests if line.startswith("POST /v1/session/next ")]

        wait(d, "the retry", lambda d: len(sent()) == 2)
        wait(d, "the retry answered", lambda d: d.find_element(By.ID, "next").is_enabled())
        assert sent()[0] == sent()[1] and len(sent()) == 2
        assert json.loads(sent()[0])["request_id"].startswith("ph-")
        assert state(rig)["session"]["point"] == "A2"
        shot(d, tmp_path / "2-after-retry.png")

        # The device's cable is pulled and plugged back: the health line follows.
        rig.control(op="unplug")
        wait(d, "the device lost", lambda d: not text(d, "h-device").startswith("connected"))
        shot(d, tmp_path / "3-device-unplugged.png")
        rig.control(op="replug")
        wait(d, "the device back", lambda d: text(d, "h-device").startswith("connected"))

    assert rig.token not in rig.log.read_text()


def test_unpaired_page_asks_for_pairing_and_a_wrong_token_is_refused(tmp_path: Path) -> None:
    """Without a token the page acts on nothing; a token the rig refuses is dropped."""
    with taprigd(tmp_path) as rig, phone(tmp_path) as d:
        d.get(f"{rig.base}/")
        wait(d, "the pairing form", lambda d: d.find_element(By.ID, "unpaired").is_displayed())
        assert not d.find_element(By.ID, "dock").is_displayed()
        d.find_element(By.ID, "pair-input").send_keys("not a token")
        d.find_element(By.CSS_SELECTOR, "#pair-form button").click()
        wait(d, "the complaint", lambda d: "not a pairing address" in text(d, "pair-error"))
        d.find_element(By.ID, "pair-input").clear()
        d.find_element(By.ID, "pair-input").send_keys(f"{rig.base}/pair#token={'x' * 43}")
        d.find_element(By.CSS_SELECTOR, "#pair-form button").click()
        wait(d, "the refusal", lambda d: "refused" in text(d, "pair-error"))
        assert "pair again with taprigd pair" in text(d, "pair-error")
        assert d.execute_script("return localStorage.getItem('taprig.token')") is None
        d.find_element(By.ID, "pair-input").clear()
        d.find_element(By.ID, "pair-input").send_keys(f"{rig.base}/pair#token={rig.token}")
        d.find_element(By.CSS_SELECTOR, "#pair-form button").click()
        wait(d, "a live event stream", lambda d: text(d, "link-chip") == "live")
        shot(d, tmp_path / "paired-by-hand.png")

        # The test can be chosen on the phone; choosing it again starts at its first open point.
        click(d, "next")
        wait(d, "the next point", lambda d: text(d, "point") == "A2")
        click(d, "test-button")
        choice = wait(
            d, "the tests", lambda d: d.find_elements(By.CSS_SELECTOR, "#test-list button")
        )
        assert [c.text for c in choice] == ["shop-panel · 30 points"]
        assert choice[0].get_attribute("aria-current") == "true"
        check_legible_and_thumb_sized(d)
        choice[0].click()
        wait(d, "the test chosen again", lambda d: text(d, "point") == "A1")
        assert not d.find_element(By.ID, "tests").is_displayed()

        # The plan: x to the right, y up; points on one spot are laid out in rows instead.
        plan = d.execute_async_script(DRAW_GRID, [{"label": "O", "x": 0, "y": 0},
                                                  {"label": "R", "x": 0.1, "y": 0},
                                                  {"label": "U", "x": 0, "y": 0.1}])  # fmt: skip
        (o, ox, oy), (r, rx, ry), (u, ux, uy) = plan
        assert (o, r, u) == ("O", "R", "U") and rx > ox and ry == oy and uy < oy and ux == ox
        stacked = [{"label": f"P{i}", "x": 0.2, "y": 0.3} for i in range(5)]
        centres = {(x, y) for _, x, y in d.execute_async_script(DRAW_GRID, stacked)}
        assert len(centres) == 5
