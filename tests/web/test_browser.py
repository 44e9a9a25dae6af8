"""The dashboard in headless Chromium: upload a demo run, find it, open it, zoom to events.

Covers only what the browser does (the API has its own tests): the upload form
and progress, the runs table, every timeline drawn with traces and event
bands (read back from the canvas pixels), an event click zooming every chart,
drag-to-zoom, the keys, and user text shown as text.
"""

from __future__ import annotations

import json
from typing import Any

import pytest

from tests.server.dashboard_fixtures import RunInputs
from tests.web.live_server import LiveServer

pytestmark = pytest.mark.browser

TIMELINES = ["torque", "wheels", "roll", "tip", "balance"]

# Every chart's x range, as [[t0, t1], ...].
RANGES_JS = "() => [...document.querySelectorAll('.chart')].map(d => d.stripChart.range)"


def _upload_through_the_page(page: Any, live: LiveServer, inputs: RunInputs, name: str) -> str:
    page.goto(f"{live.url}/upload.html")
    page.set_input_files("#logs", [str(p) for p in inputs.logs])
    page.set_input_files("#map-file", str(inputs.map_path))
    page.set_input_files("#profile-file", str(inputs.profile_path))
    page.fill("input[name=name]", name)
    page.fill("input[name=course]", "gullhaven-loop")
    page.fill("input[name=tags]", "browser, demo")
    page.click("#submit")
    link = page.wait_for_selector("#run-link", timeout=120_000)
    assert page.locator("#error").is_hidden()
    assert page.eval_on_selector("#job-bar", "b => b.value") == 1
    href = link.get_attribute("href")
    assert href and href.startswith("/run.html?id=")
    return href.split("=", 1)[1]


@pytest.fixture(scope="module")
def uploaded(browser: Any, live: LiveServer, web_demo_inputs: RunInputs) -> str:
    context = browser.new_context()
    page = context.new_page()
    try:
        return _upload_through_the_page(page, live, web_demo_inputs, "Browser upload")
    finally:
        context.close()


def _open_run(page: Any, live: LiveServer, run_id: str) -> None:
    page.goto(f"{live.url}/run.html?id={run_id}")
    page.wait_for_selector("body[data-charts-ready='1']", timeout=60_000)


def _wait_for_range_around(page: Any, start: float, end: float) -> list[list[float]]:
    page.wait_for_function(
        """([s, e]) => {
            const charts = [...document.querySelectorAll('.chart')];
            return charts.length > 0 && charts.every(d => {
                const r = d.stripChart.range;
                return r && r[0] <= s && r[1] >= e && (r[1] - r[0]) < 60;
            });
        }""",
        arg=[start, end],
        timeout=15_000,
    )
    ranges: list[list[float]] = page.evaluate(RANGES_JS)
    return ranges


def test_runs_page_lists_the_uploaded_run(
    page: Any, live: LiveServer, uploaded: str, artifacts
) -> None:
    page.goto(f"{live.url}/")
    page.wait_for_selector("body[data-loaded='1']")
    row = page.locator(f"tr[data-run-id='{uploaded}']")
    assert row.count() == 1
    assert row.locator("a.run-open").inner_text() == "Browser upload"
    assert row.locator(".badge").count() == 4
    assert "gullhaven-loop" in row.inner_text()
    assert "not a safety system" in page.locator("footer").inner_text()
    page.screenshot(path=str(artifacts / "runs-page.png"), full_page=True)
    row.locator("a.run-open").click()
    page.wait_for_selector("body[data-charts-ready='1']", timeout=60_000)
    assert f"id={uploaded}" in page.url
    assert page.page_errors == []


def test_run_page_draws_every_timeline_and_zooms_to_events(
    page: Any, live: LiveServer, uploaded: str, artifacts
) -> None:
    series_requests: list[str] = []
    page.on("request", lambda r: series_requests.append(r.url) if "/series?" in r.url else None)
    _open_run(page, live, uploaded)
    analysis = page.request.get(f"{live.url}/api/runs/{uploaded}").json()["analysis"]
    plan = page.request.get(f"{live.url}/api/runs/{uploaded}/charts").json()["panels"]
    kinds_present = {e["kind"] for e in analysis["events"]}

    charts = page.evaluate(
        """() => [...document.querySelectorAll('.chart')].map(d => ({
            id: d.id,
            traces: d.stripChart.traces.length,
            points: d.stripChart.traces.reduce((n, t) => n + t.x.length, 0),
            bands: d.stripChart.bands.length,
            drawn: d.stripChart.drawn,
        }))"""
    )
    assert [c["id"] for c in charts] == [f"chart-{p}" for p in TIMELINES]
    with_shapes = 0
    for chart, panel in zip(charts, plan, strict=True):
        assert chart["traces"] > 0 and chart["points"] > 0, chart
        assert chart["drawn"]["traces"] > 0 and chart["drawn"]["points"] > 0, chart
        if kinds_present & set(panel["event_kinds"]):
            assert chart["bands"] > 0, chart
            assert chart["drawn"]["bands"] >= chart["bands"], chart
            with_shapes += 1
    assert with_shapes >= 3, f"demo events cover too few timelines: {sorted(kinds_present)}"

    # Ingest report and detector status are on the page.
    assert page.locator("#ingest-report dl").count() > 0
    assert page.locator("#skipped").inner_text().strip()
    rows = page.locator("#events tr.event-row")
    assert rows.count() == len(analysis["events"])

    # Clicking an event zooms every chart to it, with padding on both sides.
    first = analysis["events"][0]
    rows.nth(0).click()
    ranges = _wait_for_range_around(page, first["start_s"], first["end_s"])
    assert all(r == ranges[0] for r in ranges), ranges  # one synchronised time axis
    assert ranges[0][0] < first["start_s"] or ranges[0][0] == pytest.approx(0, abs=1e-6)
    assert ranges[0][1] > first["end_s"]
    # The zoom asked the server for that window again.
    page.wait_for_function("() => document.body.dataset.window.split(',')[0] !== '0'")
    assert any("t0=" in url for url in series_requests)

    # ']' steps to the next event, '[' back (issue 13, item 15).
    page.locator("body").press("]")
    second = analysis["events"][1]
    _wait_for_range_around(page, second["start_s"], second["end_s"])
    assert page.locator("#events tr.event-row.active").get_attribute("data-index") == "1"
    page.locator("body").press("[")
    _wait_for_range_around(page, first["start_s"], first["end_s"])
    page.screenshot(path=str(artifacts / "run-page.png"), full_page=True)
    assert page.page_errors == []


def _plot_area(page: Any, chart: str) -> tuple[dict[str, float], dict[str, Any]]:
    """The chart's overlay box on screen, and its plot area (left, right [px]) and range."""
    overlay = page.locator(f"#chart-{chart} canvas.strip-overlay")
    overlay.scroll_into_view_if_needed()
    box = overlay.bounding_box()
    assert box is not None
    geometry = page.evaluate(
        "(id) => { const c = document.getElementById(id).stripChart;"
        " return {range: c.range, left: c.plotLeft(), right: c.plotRight()}; }",
        f"chart-{chart}",
    )
    return box, geometry


def test_dragging_across_one_chart_zooms_all_of_them(
    page: Any, live: LiveServer, uploaded: str
) -> None:
    _open_run(page, live, uploaded)
    box, geometry = _plot_area(page, "tip")
    a_px, b_px = geometry["left"] + 100.0, geometry["left"] + 300.0
    page.mouse.move(box["x"] + a_px, box["y"] + 60)
    page.mouse.down()
    page.mouse.move(box["x"] + (a_px + b_px) / 2, box["y"] + 62)
    page.mouse.move(box["x"] + b_px, box["y"] + 64)
    page.mouse.up()
    t0, t1 = geometry["range"]
    width = geometry["right"] - geometry["left"]
    # Linear pixel-to-time map of the plot area (the selection's ends, in seconds).
    want = [t0 + (px - geometry["left"]) / width * (t1 - t0) for px in (a_px, b_px)]
    page.wait_for_function("() => document.body.dataset.window.split(',')[0] !== '0'")
    ranges = page.evaluate(RANGES_JS)
    # one synchronised time axis; tolerance: a sub-pixel offset of the mouse position
    px_s = (t1 - t0) / width
    for r in ranges:
        assert r == pytest.approx(want, abs=1.5 * px_s), (r, want)


def test_a_window_that_fits_the_budget_comes_back_at_full_resolution(
    page: Any, live: LiveServer, uploaded: str
) -> None:
    _open_run(page, live, uploaded)
    page.evaluate("() => document.getElementById('charts').timelines.setRange([10, 12])")
    page.wait_for_function(
        """() => [...document.querySelectorAll('.chart')].every(d => {
            const r = d.stripChart.range; return Math.abs(r[0] - 10) < 1e-6 && Math.abs(r[1] - 12) < 1e-6;
        })"""
    )
    # A 2 s window of the 200 Hz demo state log fits the budget: full resolution comes back.
    page.wait_for_function("() => document.body.dataset.window.startsWith('9.')")
    points = page.evaluate(
        "() => document.getElementById('chart-roll').stripChart.traces[0].x"
        ".filter(t => t >= 10 && t <= 12).length"
    )
    # 200 Hz over 2 s, both ends inclusive: 401 samples (demo state rate; common practice).
    assert points == 401


def test_keys_and_double_click_move_the_window(page: Any, live: LiveServer, uploaded: str) -> None:
    _open_run(page, live, uploaded)
    full = page.evaluate("() => document.getElementById('charts').timelines.fullRange")
    page.evaluate("() => document.getElementById('charts').timelines.setRange([20, 24])")
    page.locator("body").press("-")  # twice as wide, same centre
    assert page.evaluate(RANGES_JS)[0] == pytest.approx([18, 26])
    page.locator("body").press("ArrowRight")  # a quarter of the window later
    assert page.evaluate(RANGES_JS)[0] == pytest.approx([20, 28])
    page.keyboard.type("+")  # typed: in press(), "+" joins keys of a combination
    assert page.evaluate(RANGES_JS)[0] == pytest.approx([22, 26])
    page.locator("#chart-balance canvas.strip-overlay").dblclick()
    ranges = page.evaluate(RANGES_JS)
    assert all(r == pytest.approx(full) for r in ranges), (ranges, full)
    assert page.page_errors == []


def test_user_text_is_shown_as_text(page: Any, live: LiveServer, uploaded: str) -> None:
    odd = '<img src=x onerror="window.__injected=1">Loop & <b>bold</b>'
    response = page.request.patch(
        f"{live.url}/api/runs/{uploaded}",
        data=json.dumps(
            {"name": odd, "notes": "<script>window.__injected=2</script>", "tags": ["<i>t</i>"]}
        ),
        headers={"Content-Type": "application/json"},
    )
    assert response.status == 200
    _open_run(page, live, uploaded)
    assert page.locator("#run-name").text_content() == odd
    assert page.locator("#run-name img, #run-name b, #run-notes script, #run-tags i").count() == 0
    assert page.evaluate("() => window.__injected") is None
    page.goto(f"{live.url}/")
    page.wait_for_selector("body[data-loaded='1']")
    assert page.locator(f"tr[data-run-id='{uploaded}'] a.run-open").text_content() == odd
    assert page.evaluate("() => window.__injected") is None
    page.request.patch(
        f"{live.url}/api/runs/{uploaded}",
        data=json.dumps({"name": "Browser upload", "notes": "", "tags": ["browser", "demo"]}),
        headers={"Content-Type": "application/json"},
    )


def test_upload_error_is_shown_in_plain_words(
    page: Any, live: LiveServer, web_demo_inputs: RunInputs, tmp_path
) -> None:
    bad_map = tmp_path / "bad-map.toml"
    bad_map.write_text(
        web_demo_inputs.map_path.read_text().replace(
            'time_column = "stamp_us"', 'time_column = "when"'
        ),
        encoding="utf-8",
    )
    page.goto(f"{live.url}/upload.html")
    page.set_input_files("#logs", [str(p) for p in web_demo_inputs.logs])
    page.set_input_files("#map-file", str(bad_map))
    page.set_input_files("#profile-file", str(web_demo_inputs.profile_path))
    page.click("#submit")
    page.wait_for_selector("#error:not([hidden])", timeout=60_000)
    text = page.locator("#error").inner_text()
    # The problem's title in plain words; no internal class name or server path (item 9).
    assert "The channel map has a problem" in text
    assert "Error" not in text and "/tmp/" not in text
    assert "when" in text
    assert "Traceback" not in text


def test_the_address_keeps_the_window_and_opens_it_again(
    page: Any, live: LiveServer, uploaded: str
) -> None:
    page.goto(f"{live.url}/run.html?id={uploaded}&t0=10&t1=12")
    page.wait_for_selector("body[data-charts-ready='1']", timeout=60_000)
    page.wait_for_function("() => document.body.dataset.window.startsWith('9.')")
    assert all(r == pytest.approx([10, 12]) for r in page.evaluate(RANGES_JS))
    page.evaluate("() => document.getElementById('charts').timelines.setRange([20.5, 31.25])")
    assert "t0=20.500&t1=31.250" in page.url
    page.locator("#chart-tip canvas.strip-overlay").dblclick()
    assert "t0=" not in page.url and f"id={uploaded}" in page.url
    assert page.page_errors == []


def test_a_late_answer_for_an_older_window_does_not_move_the_charts_back(
    page: Any, live: LiveServer, uploaded: str
) -> None:
    _open_run(page, live, uploaded)
    held: list[Any] = []
    page.route("**/series?*t0=*", lambda route: held.append(route))
    page.evaluate("() => document.getElementById('charts').timelines.setRange([20, 24])")
    for _ in range(100):  # until the first window's request is out (and held)
        if held:
            break
        page.wait_for_timeout(20)
    assert len(held) == 1
    older = page.request.get(held[0].request.url).body()
    page.evaluate("() => document.getElementById('charts').timelines.setRange([40, 44])")
    # The older window's answer arrives right after the newer zoom, within its pause.
    held[0].fulfill(status=200, body=older, content_type="application/json")
    page.wait_for_timeout(300)
    assert len(held) == 2  # the newer window's request is out, still held
    assert all(r == pytest.approx([40, 44]) for r in page.evaluate(RANGES_JS))
    for route in held[1:]:
        route.continue_()
    page.wait_for_function("() => document.body.dataset.window.startsWith('39.')")
    assert all(r == pytest.approx([40, 44]) for r in page.evaluate(RANGES_JS))
    assert page.page_errors == []


def test_an_unknown_run_is_said_in_plain_words(page: Any, live: LiveServer) -> None:
    page.goto(f"{live.url}/run.html?id=20990101-0000-abcdef")
    page.wait_for_selector("#error:not([hidden])", timeout=30_000)
    text = page.locator("#error").inner_text()
    assert "No such run" in text and "20990101-0000-abcdef" in text
    assert "RunNotFoundError" not in text
    assert page.page_errors == []  # said once, on the page; no unhandled rejection


def test_shift_drag_pans_and_png_saves_the_chart(
    page: Any, live: LiveServer, uploaded: str
) -> None:
    _open_run(page, live, uploaded)
    page.evaluate("() => document.getElementById('charts').timelines.setRange([30, 40])")
    box, geometry = _plot_area(page, "roll")
    width = geometry["right"] - geometry["left"]
    x0 = box["x"] + geometry["left"] + 0.6 * width
    page.keyboard.down("Shift")
    page.mouse.move(x0, box["y"] + 60)
    page.mouse.down()
    page.mouse.move(x0 - 0.1 * width, box["y"] + 60)
    page.mouse.move(x0 - 0.2 * width, box["y"] + 60)
    page.mouse.up()
    page.keyboard.up("Shift")
    # Dragging left by a fifth of the plot moves the 10 s window 2 s later, every chart alike.
    ranges = page.evaluate(RANGES_JS)
    for r in ranges:
        assert r == pytest.approx([32, 42], abs=0.05), ranges  # tolerance: sub-pixel mouse
    with page.expect_download() as download:
        page.locator(".panel", has=page.locator("#chart-roll")).get_by_role(
            "button", name="PNG"
        ).click()
    path = download.value.path()
    assert download.value.suggested_filename == f"{uploaded}-roll.png"
    # PNG signature (ISO/IEC 15948, section 5.2): the first eight bytes of every PNG file.
    assert path is not None and path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    # The image carries a title, the run id, the window and the legend above the chart
    # (issue 13, item 11): taller than the chart's canvas. IHDR height: bytes 20-24, big
    # endian (ISO/IEC 15948, section 11.2.2).
    png_height = int.from_bytes(path.read_bytes()[20:24], "big")
    canvas_height = page.eval_on_selector("#chart-roll canvas", "c => c.height")
    assert png_height > canvas_height
    header = page.evaluate(
        "() => { const t = document.getElementById('charts').timelines;"
        " return t.pngHeader(t.panels.find(p => p.id === 'roll')); }"
    )
    assert header["lines"][0] == page.locator(".panel h3", has_text="oll").first.inner_text()
    assert uploaded in header["lines"][1] and "32.0" in header["lines"][1]
    assert "42.0" in header["lines"][1] and " s" in header["lines"][1]
    assert len(header["legend"]) >= 2
    assert page.page_errors == []


def test_window_csv_saves_the_samples_the_charts_show(
    page: Any, live: LiveServer, uploaded: str
) -> None:
    _open_run(page, live, uploaded)
    page.evaluate("() => document.getElementById('charts').timelines.setRange([10, 12])")
    with page.expect_download() as download:
        page.click("#dl-window")
    path = download.value.path()
    assert path is not None
    lines = path.read_text().splitlines()
    assert lines[0].startswith("t [s],")
    # 200 Hz demo state log over 2 s, both ends inclusive: 401 samples on an exact grid; the
    # demo logs carry stamp jitter (a sample at an end may fall just outside) and an
    # occasional dropped row (1 in 2000), so 399 to 401, every one inside the window.
    assert 399 <= len(lines) - 1 <= 401
    times = [float(line.split(",", 1)[0]) for line in lines[1:]]
    assert min(times) >= 10.0 and max(times) <= 12.0
    assert page.locator("#error").is_hidden()
    # The whole of a long run is refused by the server; the page says so in words.
    page.route(
        "**/window.csv?*",
        lambda route: route.fulfill(
            status=400,
            content_type="application/problem+json",
            body='{"type": "/api.html#problem-request-refused", "title": "The request was '
            'refused", "status": 400, "detail": "Choose a shorter window."}',
        ),
    )
    page.click("#dl-window")
    page.wait_for_selector("#error:not([hidden])")
    assert "Choose a shorter window" in page.locator("#error").inner_text()
    assert page.page_errors == []
