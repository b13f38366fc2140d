"""The README's screenshot of the lesson page, made in headless Chromium.

    python docs/lesson_screenshot.py

Writes the lesson page of samples/bias_mirror.toml, opens it, loads the clustered
arrangement, makes two swaps through the page and saves docs/lesson.png; then the
sequence page of samples/unary/heron_msb.toml with the centre-pairs order and one
exchange, saved as docs/lesson-sequence.png; then the course's wire exercise
(samples/course) after the four swaps that meet it, with a hint shown, saved as
docs/lesson-exercise.png.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))   # run as a script from docs/: make tests.browser importable

from tests.browser import chromium  # noqa: E402


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        subprocess.run([sys.executable, "-m", "placer", "lesson",
                        str(ROOT / "samples" / "bias_mirror.toml"), "--out", tmp,
                        "--time-limit", "10"], check=True, capture_output=True)
        page = next(Path(tmp).glob("*-lesson.html"))
        driver = chromium(1400, 900)
        try:
            driver.get(page.as_uri())
            for a, b in (((0, 1), (1, 6)), ((0, 6), (1, 1))):
                for r, c in (a, b):
                    driver.find_element("css selector",
                                        f'.slot[data-row="{r}"][data-col="{c}"]').click()
            driver.save_screenshot(str(ROOT / "docs" / "lesson.png"))
            subprocess.run([sys.executable, "-m", "placer", "lesson",
                            str(ROOT / "samples" / "unary" / "heron_msb.toml"), "--out", tmp,
                            "--time-limit", "10"], check=True, capture_output=True)
            driver.get((Path(tmp) / "heron_msb-lesson.html").as_uri())
            driver.find_element("css selector", '[data-load="2"]').click()
            for r, c in ((3, 3), (0, 0)):
                driver.find_element("css selector",
                                    f'.slot[data-row="{r}"][data-col="{c}"]').click()
            driver.save_screenshot(str(ROOT / "docs" / "lesson-sequence.png"))
            course = ROOT / "samples" / "course"
            subprocess.run([sys.executable, "-m", "placer", "lesson",
                            str(course / "common_centroid.toml"), "--exercise",
                            str(course / "common_centroid-wire-exercise.toml"), "--out", tmp,
                            "--time-limit", "10"], check=True, capture_output=True)
            driver.get((Path(tmp) / "plover_mirror-lesson.html").as_uri())
            for r, c in ((0, 3), (2, 3), (0, 4), (2, 4), (1, 1), (3, 1), (1, 2), (3, 2)):
                driver.find_element("css selector",
                                    f'.slot[data-row="{r}"][data-col="{c}"]').click()
            driver.find_element("id", "ex-hint").click()
            driver.save_screenshot(str(ROOT / "docs" / "lesson-exercise.png"))
        finally:
            driver.quit()
    print("wrote docs/lesson.png, docs/lesson-sequence.png and docs/lesson-exercise.png")


if __name__ == "__main__":
    main()
