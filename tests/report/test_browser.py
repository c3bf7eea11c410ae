"""The pages in a real browser: Debian's ``chromium``, headless.

The team page and every model's page of the ``team`` world (three models: one predictor with an
acknowledgement and a promotion, two predictors with a column named ``<b>x</b>``, one never
checked) are opened by a probe page of this test, each in a frame; a script of the probe (the
report pages have none) reads what the browser made of them: whether each page loaded, each
image's decoded size, the links' targets as the browser resolves them, the visible text and
which elements exist. Chromium's console output (``--enable-logging=stderr``) shows any script
error or console message of a page. A copy with one chart removed shows that a missing image
is caught. Skipped, with the reason, where chromium is not installed (``.ci/run`` installs it).
"""

from __future__ import annotations

import json
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path
from urllib.parse import unquote, urlparse

import pytest

from monitor.report.team import write_team_report
from tests.report.conftest import HOSTILE_COLUMN, HOSTILE_REASON, IDLE, LONGLEY, TEAM_LAST, Team
from tests.support.png import png_size
from tests.support.world import MODEL, night_after

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
pytestmark = pytest.mark.skipif(
    CHROMIUM is None, reason="Debian's chromium is not installed (apt-get install chromium), "
                             "so the pages were not opened in a real browser")

PROBE = """<!DOCTYPE html>
<html><head><meta charset="utf-8"><title>probe</title></head><body>
{frames}
<pre id="result"></pre>
<script>
window.addEventListener("load", function () {{
  var found = [];
  document.querySelectorAll("iframe").forEach(function (frame) {{
    var d = frame.contentDocument;
    found.push({{
      page: frame.getAttribute("src"),
      url: d.URL, state: d.readyState, title: d.title,
      text: d.body ? d.body.innerText : "",
      images: Array.from(d.images).map(function (i) {{
        return {{src: i.getAttribute("src"), url: i.src, complete: i.complete,
                width: i.naturalWidth, height: i.naturalHeight}};
      }}),
      links: Array.from(d.links).map(function (a) {{ return a.href; }}),
      tags: Array.from(new Set(Array.from(d.getElementsByTagName("*")).map(
        function (e) {{ return e.tagName.toLowerCase(); }})))
    }});
  }});
  document.getElementById("result").textContent = JSON.stringify(found);
}});
</script>
</body></html>
"""


class Result(HTMLParser):
    """The text of the probe's ``<pre id="result">`` in the DOM chromium dumps."""

    def __init__(self, dom: str):
        super().__init__(convert_charrefs=True)
        self.inside, self.text = False, ""
        self.feed(dom)
        self.close()

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.inside = self.inside or (tag == "pre" and dict(attrs).get("id") == "result")

    def handle_endtag(self, tag: str) -> None:
        self.inside = self.inside and tag != "pre"

    def handle_data(self, data: str) -> None:
        if self.inside:
            self.text += data


def _chromium(url: str, profile: Path, *extra: str) -> subprocess.CompletedProcess[str]:
    assert CHROMIUM is not None
    return subprocess.run(
        [CHROMIUM, "--headless=new", "--disable-gpu", "--no-sandbox", "--no-first-run",
         f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0",
         "--virtual-time-budget=15000", *extra, "--dump-dom", url],
        capture_output=True, text=True, timeout=180, check=False)


def _console(stderr: str, probe: str) -> list[str]:
    """Console messages and script errors of the pages (the probe's own lines left out)."""
    return [line for line in stderr.splitlines() if ":CONSOLE" in line and probe not in line]


def _open(pages: list[Path], folder: Path) -> tuple[list[dict], list[str]]:
    folder.mkdir()
    frames = "\n".join(f'<iframe src="{p.as_uri()}" width="1100" height="800"></iframe>'
                       for p in pages)
    probe = folder / "probe.html"
    probe.write_text(PROBE.format(frames=frames), encoding="utf-8")
    run = _chromium(probe.as_uri(), folder / "profile", "--allow-file-access-from-files")
    text = Result(run.stdout).text
    assert text, f"the probe gave no result (exit {run.returncode}):\n{run.stderr[-3000:]}"
    return json.loads(text), _console(run.stderr, probe.name)


def _path(url: str) -> Path:
    parsed = urlparse(url)
    assert parsed.scheme == "file", url
    return Path(unquote(parsed.path))


def test_every_page_loads_in_chromium_with_its_images_and_no_errors(team: Team,
                                                                   tmp_path: Path) -> None:
    report = write_team_report(team.settings, tmp_path / "team", engine=team.engine,
                               now=night_after(TEAM_LAST))
    pages = [report.path, *(report.path.parent / "models" / n / "index.html"
                            for n in (MODEL, LONGLEY, IDLE))]
    found, console = _open(pages, tmp_path / "probe")
    assert console == [], "console messages or script errors:\n" + "\n".join(console)
    assert [_path(f["url"]) for f in found] == pages
    for frame in found:
        where = frame["page"]
        assert frame["state"] == "complete" and frame["title"].startswith("fitwatch"), where
        assert frame["images"], where
        for image in frame["images"]:
            assert image["complete"] and image["width"] > 0, (where, image["src"])
            size = png_size(_path(image["url"]).read_bytes())
            assert (image["width"], image["height"]) == size, (where, image["src"])
        for link in frame["links"]:
            assert _path(link).is_file(), (where, link)
        assert not {"script", "b", "iframe"} & set(frame["tags"]), where
    team_page, dock, longley, idle = found
    assert {_path(link) for link in team_page["links"]} == set(pages[1:])
    for name in (MODEL, LONGLEY, IDLE):
        assert name in team_page["text"]
    assert f"TOTEMP ~ GNP + {HOSTILE_COLUMN}" in longley["text"]  # shown as typed
    assert f"One panel per predictor (GNP and {HOSTILE_COLUMN})" in longley["text"]
    assert HOSTILE_REASON in dock["text"]
    assert "Not checked yet" in idle["text"]
    # without the probe's allowances, a plain headless load of the team page shows the table
    plain = _chromium(report.path.as_uri(), tmp_path / "plain-profile")
    assert '<table id="models">' in plain.stdout and _console(plain.stderr, "-") == []


def test_a_missing_chart_is_caught(team: Team, tmp_path: Path) -> None:
    report = write_team_report(team.settings, tmp_path / "team", engine=team.engine,
                               now=night_after(TEAM_LAST))
    longley = report.path.parent / "models" / LONGLEY / "index.html"
    (longley.parent / "glance.png").unlink()
    (longley.parent / "planned.png").unlink()
    found, _ = _open([report.path, longley], tmp_path / "probe")
    broken = {(_path(f["url"]), i["src"]) for f in found for i in f["images"]
              if not (i["complete"] and i["width"] > 0)}
    assert broken == {(report.path, f"models/{LONGLEY}/glance.png"), (longley, "planned.png")}
