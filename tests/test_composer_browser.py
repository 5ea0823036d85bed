"""The composer page in a real browser: headless Chromium driven by Selenium.

Chromium and its driver come from Debian's packages (``.ci/run`` installs them);
the test fails, not skips, when they are missing.  Set ``COMPOSER_SCREENSHOT`` to
a path to keep the screenshot (docs/composer.png is made that way).
"""

import io
import os
import threading
import urllib.request

import numpy as np
import pytest
from PIL import Image

from render import load_scene, render_still
from render.api import open_scene
from render.composer.server import make_server, server_url
from render.composer.session import ComposerSession
from render.errors import SceneError

CHROMIUM = "/usr/bin/chromium"
CHROMEDRIVER = "/usr/bin/chromedriver"
# No network on the test machines: without these Chromium waits on look-ups and updates.
CHROMIUM_FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--window-size=1280,1400")
WAIT_SECONDS = 60   # a ceiling for a slow shared machine, not a speed check
SCENE = ("name: trial\nobserver:\n  placement: distant\n  inclination: 60\n"
         "  field_of_view: 40\nimage:\n  width: 512\n  height: 512\ndisk:\n"
         "  outer_radius: 20\ntracing:\n  method: auto\n")   # fixed, not the defaults


@pytest.fixture
def composer(tmp_path):
    """A composer server on a free loopback port for a distant-observer scene."""
    scene_file = tmp_path / "trial.yaml"
    scene_file.write_text(SCENE)
    server = make_server(ComposerSession(scene_file, tmp_path / "out"))
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield server_url(server), scene_file, tmp_path / "out"
    server.shutdown()
    server.server_close()


@pytest.fixture
def browser(tmp_path):
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    for program in (CHROMIUM, CHROMEDRIVER):
        assert os.access(program, os.X_OK), (
            f"{program} is missing: apt-get install -y chromium chromium-driver")
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in CHROMIUM_FLAGS:
        options.add_argument(flag)
    options.add_argument(f"--user-data-dir={tmp_path / 'chromium-profile'}")
    driver = webdriver.Chrome(service=Service(CHROMEDRIVER), options=options)
    yield driver
    driver.quit()


def _wait(driver, condition, what):
    from selenium.webdriver.support.ui import WebDriverWait

    return WebDriverWait(driver, WAIT_SECONDS, poll_frequency=0.05).until(
        lambda d: condition(d), message=f"waiting for {what}")


def _control(driver, key):
    from selenium.webdriver.common.by import By

    return driver.find_element(By.CSS_SELECTOR, f'.control[data-key="{key}"]')


def _type(driver, key, text):
    from selenium.webdriver.common.by import By
    from selenium.webdriver.common.keys import Keys

    field = _control(driver, key).find_element(By.TAG_NAME, "input")
    field.send_keys(Keys.CONTROL, "a")
    field.send_keys(text)


def _shown_preview(driver):
    from selenium.webdriver.common.by import By

    image = driver.find_element(By.ID, "preview")
    status = driver.find_element(By.ID, "status").text
    return image.get_attribute("data-preview-id") if "server time" in status else None


def _shown_pixels(driver):
    from selenium.webdriver.common.by import By

    source = driver.find_element(By.ID, "preview").get_attribute("src")
    with urllib.request.urlopen(source, timeout=30) as reply:
        return np.asarray(Image.open(io.BytesIO(reply.read())))


def test_the_page_previews_validates_probes_saves_and_renders(composer, browser, tmp_path):
    from selenium.webdriver.common.action_chains import ActionChains
    from selenium.webdriver.common.by import By

    url, scene_file, output = composer
    browser.get(url)
    first = _wait(browser, _shown_preview, "the first preview")

    # Move a control: the image changes to exactly the direct render of the same scene.
    _type(browser, "observer.inclination", "30")
    second = _wait(browser, lambda d: _shown_preview(d) not in (None, first) and _shown_preview(d),
                   "the preview after the change")
    direct = render_still(load_scene(scene_file, [
        "observer.inclination=30", "image.width=256", "image.height=256", "output.npz=false",
        "tracing.tolerance=1e-6"]))
    assert np.array_equal(_shown_pixels(browser), direct.pixels)

    # A bad value: the command line's one-line message beside its control; nothing rendered.
    with pytest.raises(SceneError) as cli_message:
        open_scene(scene_file, ["black_hole.spin=1.5"])
    _type(browser, "black_hole.spin", "1.5")
    error = _wait(browser, lambda d: _control(d, "black_hole.spin").find_element(
        By.CLASS_NAME, "error").text, "the message beside the spin")
    assert error == str(cli_message.value)
    assert _control(browser, "black_hole.spin").get_attribute("class") == "control bad"
    assert browser.find_element(By.ID, "preview").get_attribute("data-preview-id") == second
    _type(browser, "black_hole.spin", "0.9")
    _wait(browser, lambda d: _shown_preview(d) not in (None, second), "the preview after fixing")

    # The numbers under the cursor, and the critical curve over the image.
    ActionChains(browser).move_to_element(browser.find_element(By.ID, "frame")).perform()
    fate = _wait(browser, lambda d: d.find_element(By.ID, "probe-fate").text.strip("-"),
                 "the numbers under the cursor")
    assert fate == "captured"   # the centre of the image is inside the shadow (common practice)
    browser.find_element(By.ID, "show-curve").click()
    points = _wait(browser, lambda d: d.find_element(By.ID, "curve").get_attribute("points"),
                   "the critical curve")
    assert len(points.split()) == 257

    # Save the scene and load it back; then render a small still and see it on the page.
    browser.find_element(By.ID, "save").click()
    _wait(browser, lambda d: "saved" in d.find_element(By.ID, "save-result").text, "the save")
    assert load_scene(output / "trial.yaml").values == load_scene(
        scene_file, ["observer.inclination=30"]).values
    _type(browser, "image.width", "48")
    _type(browser, "image.height", "48")
    browser.find_element(By.ID, "still").click()
    _wait(browser, lambda d: d.execute_script(
        "const i = document.getElementById('still-image'); return !i.hidden && i.complete "
        "&& i.naturalWidth;"), "the still on the page")
    assert browser.find_element(By.ID, "still-result").text == "wrote trial.png, trial.npz"
    assert Image.open(output / "trial.png").size == (48, 48)

    # Dragging orbits: 0.5 deg per pixel, up raises the inclination, right lowers the azimuth.
    before = _shown_preview(browser)
    ActionChains(browser).drag_and_drop_by_offset(
        browser.find_element(By.ID, "frame"), 20, -40).perform()
    _wait(browser, lambda d: _shown_preview(d) not in (None, before)
          and d.find_element(By.ID, "status").text.startswith("256x256"), "the preview after a drag")
    assert browser.find_element(By.ID, "control-observer-inclination").get_attribute(
        "value") == "50.0"
    assert browser.find_element(By.ID, "control-observer-azimuth").get_attribute(
        "value") == "-10.0"

    screenshot = tmp_path / "composer.png"
    assert browser.save_screenshot(str(screenshot))
    with Image.open(screenshot) as shot:
        assert shot.size[0] > 0
        if os.environ.get("COMPOSER_SCREENSHOT"):   # kept small for the README
            shot.convert("RGB").resize((shot.size[0] // 2, shot.size[1] // 2),
                                       Image.LANCZOS).save(os.environ["COMPOSER_SCREENSHOT"])
