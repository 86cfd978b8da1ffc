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
    for expected in ("fringecal run", "sweep", "10/20", "mirror gray 7, grating 0/80", "gray 0 (drift reference)",
                     "0.800", "90 % of full scale",
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
    assert "[sweep] 20 steps" in text and "[sweep] 10/20 (50%)" in text
    assert "camera timeout at gray 40" in text


def test_plain_progress_says_what_it_measures_marks_references_and_shows_exposure_trials():
    state, out = RunState("fringecal run"), io.StringIO()
    plain = PlainProgress(state, out)
    events = [{"event": "stage", "name": "exposure", "total": 10, "done": 0, "what": "up to 10 exposure trials"}]
    for exposure_s, peak, saturated in ((0.004, 1.0, 310), (0.002, 0.93, 0), (0.0015, 0.71, 0)):
        events.append({"event": "frame", "purpose": "exposure", "gray": 0, "t_s": 0.0, "exposure_s": exposure_s,
                       "peak_fraction": peak, "saturated_px": saturated, "phase_rad": None, "contrast": None})
    events += [{"event": "stage", "name": "sweep", "total": 3, "done": 0, "what": "2 gray levels + 1 drift reference"},
               {"event": "frame", "purpose": "level", "gray": 5, "t_s": 1.0, "phase_rad": 0.1, "contrast": 0.8,
                "peak_fraction": 0.7, "saturated_px": 0},
               {"event": "unit", "key": "level:0", "done": 1, "total": 3},
               {"event": "frame", "purpose": "reference", "gray": 0, "t_s": 2.0, "phase_rad": 0.0, "contrast": 0.8,
                "peak_fraction": 0.7, "saturated_px": 0},
               {"event": "unit", "key": "reference:0", "done": 2, "total": 3}]
    for e in events:
        state(e)
        plain(e)
    lines = out.getvalue().splitlines()
    assert lines[0] == "[exposure] up to 10 exposure trials"
    assert lines[1:4] == ["[exposure] trial 1: 4.000 ms, peak 100% of full scale, 310 px saturated",
                          "[exposure] trial 2: 2.000 ms, peak 93% of full scale",
                          "[exposure] trial 3: 1.500 ms, peak 71% of full scale"]
    assert lines[4] == "[sweep] 2 gray levels + 1 drift reference"
    assert lines[5].startswith("[sweep] 1/3 (33%) gray 5 contrast")
    assert lines[6].startswith("[sweep] 2/3 (66%) gray 0 (drift reference) contrast")


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
