"""The live dashboard and the plain progress lines, as a user or a log file sees them."""

import io
import json

from rich.console import Console

from rig.output.dashboard import EventFile, LiveDashboard, PlainProgress, RunState, sparkline, text_plot


def feed(state, extra=()):
    events = [{"event": "stage", "name": "sweep", "total": 20, "done": 0},
              {"event": "pattern", "mirror_gray": 7, "low": 0, "high": 80}]
    for i in range(10):
        events.append({"event": "frame", "purpose": "level", "gray": i * 10, "t_s": float(i), "phase_rad": 0.3 * i,
                       "contrast": 0.81, "peak_fraction": 0.72, "saturated_px": 0,
                       "profile": [100 + 50 * ((k % 10) < 5) for k in range(64)]})
        events.append({"event": "unit", "key": f"level:{i}", "done": i + 1, "total": 20})
    for t, phase in ((0.0, 0.1), (9.0, 0.35)):
        events.append({"event": "frame", "purpose": "reference", "gray": 0, "t_s": t, "phase_rad": phase,
                       "contrast": 0.8, "peak_fraction": 0.9, "saturated_px": 12, "profile": []})
    events += [{"event": "fault", "kind": "timeout", "count": 1, "gray": 40}, *extra]
    for e in events:
        state(e)
    return events


def test_dashboard_shows_stage_progress_levels_drift_faults_and_saturation():
    state = RunState("fringecal run")
    feed(state, [{"event": "log", "message": "pair 0/80: contrast 0.84"}])
    console = Console(record=True, width=100, file=io.StringIO(), color_system=None)
    console.print(LiveDashboard(state, console=console).render())
    text = console.export_text()
    for expected in ("fringecal run", "sweep", "10/20", "mirror gray 7, grating 0/80", "0.800", "90 % of full scale",
                     "SATURATED: 12 px", "+0.250 rad", "timeout 1", "pair 0/80: contrast 0.84", "phase vs gray"):
        assert expected in text, expected
    assert "▁" in text and "█" in text and "•" in text


def test_plain_progress_has_no_escape_codes_and_reports_faults():
    state = RunState("fringecal sweep")
    out = io.StringIO()
    plain = PlainProgress(state, out)

    def both(event):
        state(event)
        plain(event)

    for e in feed(RunState("x")):
        both(e)
    text = out.getvalue()
    assert "\x1b" not in text
    assert "[sweep] 20 units to measure" in text and "[sweep] 10/20 (50%)" in text
    assert "camera timeout at gray 40" in text


def test_event_file_is_json_lines(tmp_path):
    path = tmp_path / "events.jsonl"
    sink = EventFile(path)
    events = feed(RunState("x"))
    for e in events:
        sink(e)
    sink.close()
    lines = [json.loads(l) for l in path.read_text().splitlines()]
    assert [l["event"] for l in lines] == [e["event"] for e in events] and all("time" in l for l in lines)


def test_sparkline_and_text_plot_scale_to_their_range():
    assert sparkline([0, 1, 2, 3, 4, 5, 6, 7]) == "▁▂▃▄▅▆▇█"
    rows = text_plot([0, 1, 2], [0, 1, 2], width=3, height=3)
    assert rows == ["  •", " • ", "•  "]
