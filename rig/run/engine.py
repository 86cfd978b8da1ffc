"""The run loop: executes step generators on a screen and a camera, analyses frames off the acquisition path, journals them.

Contract:
- Frames exposed before the settle deadline of the last pattern change are discarded, never analysed. A camera in
  software-trigger mode (``camera.trigger``) starts one exposure per grab, and the engine grabs only after the
  deadline, so each needed frame is exactly one exposure and none is discarded.
- Camera timeouts and incomplete frames are retried with a bounded back-off and counted; ``MAX_RETRIES`` failures in
  a row, or a camera that is gone, raise ``DeviceFault`` after everything analysed so far has been journaled.
- Analysis runs in one worker thread and saving (frame crops, journal lines) in a second, each in submission order,
  so the loop waits only on hardware while they keep up (and on them, past MAX_BACKLOG frames behind, so memory stays
  bounded); a checkpoint is journaled after the frames of its unit.
- A save that fails (a full disk) stops every later save, and its error reaches the loop at the next frame.
- ``request_stop()`` (Ctrl-C) makes the loop stop before the next pattern change: ``Interrupted`` is raised once the
  worker has drained, leaving the run resumable. It takes no lock (a signal handler may interrupt the loop while it
  holds one); the notice it is given is published by the loop at its next step.
"""

from __future__ import annotations

import collections
import math
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Callable

import numpy as np

from analysis.patterns import Rect, layout_of, split_in_rect, split_screen, staircase_split
from rig.errors import DeviceFault, FringecalError
from rig.run.steps import (Checkpoint, Grab, Measurement, SetExposure, Settle, ShowSplit, ShowStaircase, Stage,
                           UseRegion, Wait)

MAX_RETRIES = 8
BACKOFF_S = (0.02, 0.05, 0.1, 0.2, 0.5, 1.0)
MAX_BACKLOG = 64  # frames waiting in either worker before the acquisition loop waits for them
MAX_STALE = 200  # frames dropped for one grab before the camera is declared out of step with the panel


class Interrupted(FringecalError):
    """The run was stopped on request and can be resumed."""


class Engine:
    """Executes measurement steps on ``screen`` and ``camera``; ``analyzer`` turns frames into FrameResults.

    ``on_frame(record, result, image)`` is called in the worker for every analysed frame and returns the journal
    record (the run folder uses it to save crops); ``publish(event)`` receives progress events from both threads.
    """

    def __init__(self, cfg, screen, camera, clock, analyzer, journal=None, publish: Callable[[dict], None] = None,
                 on_frame: Callable | None = None, timeout_s: float = 2.0, frames_before: int = 0, session: int = 1,
                 discard_frames: int = 0, readings: Callable[[], dict] | None = None):
        self.cfg = cfg
        self.screen, self.camera, self.clock = screen, camera, clock
        self.analyzer = analyzer
        self.journal = journal
        self.publish = publish or (lambda event: None)
        self.on_frame = on_frame
        self.timeout_s = timeout_s
        self.faults: collections.Counter[str] = collections.Counter()
        self.frames_grabbed = frames_before  # frames journaled by earlier sessions of a resumed run
        self.session = session  # which session of the run (1, then one more per resume) wrote a journal line
        # accessories: frames dropped after each pattern change where camera timestamps cannot be trusted, and the
        # readings (power, temperature) taken during each settle and merged into the journal lines after it
        self.discard_frames, self.readings = discard_frames, readings
        self._to_discard = 0
        self._readings: dict = {}
        self._stop = False
        self._stop_notice: str | None = None
        self._worker = ThreadPoolExecutor(max_workers=1, thread_name_prefix="analysis")
        self._saver = ThreadPoolExecutor(max_workers=1, thread_name_prefix="saving")
        self._pending: collections.deque[Future] = collections.deque()
        self._saving: collections.deque[Future] = collections.deque()
        self._save_failed: BaseException | None = None
        self._patterns: dict[tuple, np.ndarray] = {}
        self._region: UseRegion = UseRegion(None)
        self._changed_at = -math.inf
        self._deadline = -math.inf
        self._units_done = 0
        self._stage_total = 0

    # --- control ---------------------------------------------------------------------------------------------
    def request_stop(self, notice: str | None = None) -> None:
        """Stop before the next pattern change; ``notice`` is logged at the next step. Safe in a signal handler:
        it only sets attributes (publishing from there could wait forever on a lock the interrupted loop holds)."""
        self._stop_notice = notice
        self._stop = True

    def run(self, steps):
        """Execute the generator ``steps`` to its end and return its return value."""
        reply = None
        try:
            while True:
                try:
                    step = steps.send(reply)
                except StopIteration as done:
                    return done.value
                reply = self._execute(step)
        finally:
            self.drain()

    def drain(self) -> None:
        """Wait until every submitted frame is analysed and saved; re-raise the first worker failure."""
        while self._pending:
            self._pending.popleft().result()
        while self._saving:
            self._saving.popleft().result()

    def close(self) -> None:
        """Drain and stop the workers."""
        try:
            self.drain()
        finally:
            self._worker.shutdown(wait=True)
            self._saver.shutdown(wait=True)

    # --- steps -----------------------------------------------------------------------------------------------
    def _execute(self, step):
        if self._stop_notice is not None:
            notice, self._stop_notice = self._stop_notice, None
            self.publish({"event": "log", "message": notice})
        if isinstance(step, (ShowSplit, ShowStaircase, Stage)) and self._stop:
            self.drain()
            raise Interrupted("stopped on request; resume to finish")
        if isinstance(step, ShowSplit):
            return self._show(step)
        if isinstance(step, ShowStaircase):
            m = self.cfg.modulator
            if self._region.rect is not None:
                raise TypeError("ShowStaircase: the sign probe is drawn on the whole panel; clear the region first")
            return self._put(staircase_split(m.width_px, m.height_px, step.mirror_gray, step.step_grays,
                                             layout_of(self.cfg.pattern), step.rising_away, m.bit_depth),
                             {"event": "pattern", "mirror_gray": step.mirror_gray, "low": min(step.step_grays),
                              "high": max(step.step_grays), "probe": "staircase"})
        if isinstance(step, Settle):
            self._deadline = self._changed_at + step.seconds
            if self.readings is not None:
                self._readings = self.readings()  # the serial round trips use time spent waiting anyway
            self.clock.sleep(self._deadline - self.clock.now())
            return None
        if isinstance(step, Grab):
            return self._grab(step)
        if isinstance(step, UseRegion):
            self._region = step
            return None
        if isinstance(step, Wait):
            self.clock.sleep(step.seconds)
            return None
        if isinstance(step, SetExposure):
            self.camera.exposure_s = step.exposure_s
            return None
        if isinstance(step, Checkpoint):
            self._submit(self._checkpoint, step.key, self.clock.now())
            return None
        if isinstance(step, Stage):
            self._units_done, self._stage_total = step.done, step.total
            self.publish({"event": "stage", "name": step.name, "total": step.total, "done": step.done,
                          "what": step.what})
            return None
        raise TypeError(f"step: expected one of the step types of rig.run.steps, got {step!r}")

    def _show(self, step: ShowSplit) -> None:
        key = (step.mirror_gray, step.low, step.high, self._region)
        if key not in self._patterns:
            if len(self._patterns) > 8:
                self._patterns.clear()
            m, p = self.cfg.modulator, self.cfg.pattern
            grays = (step.mirror_gray, step.low, step.high)
            if self._region.rect is None:
                self._patterns[key] = split_screen(m.width_px, m.height_px, *grays, layout_of(p), m.bit_depth)
            else:
                self._patterns[key] = split_in_rect(m.width_px, m.height_px, Rect(*self._region.rect), *grays,
                                                    layout_of(p), self._region.background_gray, m.bit_depth)
        self._put(self._patterns[key], {"event": "pattern", "mirror_gray": step.mirror_gray, "low": step.low,
                                         "high": step.high})

    def _put(self, pattern: np.ndarray, event: dict) -> None:
        """Show ``pattern``; frames count from the change."""
        self.screen.show(pattern)
        self._changed_at = self.clock.now()
        self._deadline = self._changed_at
        self._to_discard = self.discard_frames
        self.publish(event)

    def _grab(self, step: Grab):
        futures, images = [], []
        failures = stale = 0
        while len(futures) < step.frames:
            try:
                frame = self.camera.grab(timeout_s=self.timeout_s)
            except TimeoutError as err:
                failures = self._retry("timeout", step, failures, err)
                continue
            except ConnectionError as err:
                self.drain()
                raise DeviceFault(f"camera: {err} (at gray {step.gray}, {step.purpose})") from None
            if not frame.complete:
                failures = self._retry("incomplete", step, failures, "frame delivered incomplete")
                continue
            if frame.timestamp_s - frame.exposure_s / 2 < self._deadline:
                stale += 1
                self.faults["stale"] += 1
                if stale > MAX_STALE:
                    self.drain()
                    raise DeviceFault(f"camera: {stale} frames in a row predate the settle deadline; "
                                      "are camera timestamps on the bench clock?")
                continue
            if self._to_discard:
                self._to_discard -= 1
                self.faults["discarded"] += 1
                continue
            failures = 0
            self.frames_grabbed += 1
            futures.append(self._submit(self._analyse, frame, step, self.frames_grabbed, dict(self._readings)))
            if step.wait and step.purpose == "locate":
                images.append(frame.image)
        if not step.wait:
            return None
        return Measurement(tuple(f.result() for f in futures), tuple(images))

    def _retry(self, kind: str, step: Grab, failures: int, err) -> int:
        self.faults[kind] += 1
        self._submit(self._journal_fault, kind, step, self.clock.now(), str(err))
        self.publish({"event": "fault", "kind": kind, "count": self.faults[kind], "gray": step.gray})
        failures += 1
        if failures >= MAX_RETRIES:
            self.drain()
            raise DeviceFault(f"camera: {failures} {kind}s in a row at gray {step.gray} ({step.purpose}); "
                              f"last: {err}")
        self.clock.sleep(BACKOFF_S[min(failures - 1, len(BACKOFF_S) - 1)])
        return failures

    # --- workers -------------------------------------------------------------------------------------------
    @staticmethod
    def _queue(pool: ThreadPoolExecutor, queue: collections.deque, func, *args) -> Future:
        while queue and (queue[0].done() or len(queue) >= MAX_BACKLOG):
            queue.popleft().result()
        future = pool.submit(func, *args)
        queue.append(future)
        return future

    def _submit(self, func, *args) -> Future:
        """Run ``func`` in the analysis worker (in order); what it saves goes on to the saving worker."""
        return self._queue(self._worker, self._pending, func, *args)

    def _save(self, func, *args) -> None:
        self._queue(self._saver, self._saving, self._save_unless_failed, func, *args)

    def _save_unless_failed(self, func, *args) -> None:
        """Run one save; after a save has failed (a full disk) run none: nothing after a lost frame is recorded, so
        no checkpoint can claim a unit whose frames are not all on disk."""
        if self._save_failed is not None:
            raise self._save_failed
        try:
            func(*args)
        except BaseException as err:
            self._save_failed = err
            raise

    def _analyse(self, frame, step: Grab, number: int, readings: dict):
        result = self.analyzer(frame.image, step.gray, step.purpose, frame.timestamp_s, frame.sequence)
        record = {"frame": number, "session": self.session, "unit": step.unit, "purpose": step.purpose,
                  "gray": step.gray, "t_s": round(frame.timestamp_s, 9), "sequence": frame.sequence,
                  "exposure_s": frame.exposure_s, "phase_rad": result.phase_rad, "phase_std_rad": result.phase_std_rad,
                  "contrast": result.contrast, "amplitude_adu": result.amplitude_adu,
                  "background_adu": result.background_adu, "peak_fraction": round(result.peak_fraction, 5),
                  "saturated_px": result.saturated_px, **readings}
        self.publish({"event": "frame", **record, "profile": self.analyzer.profile(frame.image)})
        self._save(self._store_frame, record, frame, step)
        return result

    def _store_frame(self, record: dict, frame, step: Grab) -> None:
        if self.on_frame is not None:
            record = self.on_frame(record, frame, step)
        if self.journal is not None:
            self.journal.append(record)

    def _journal_fault(self, kind: str, step: Grab, t_s: float, message: str) -> None:
        self._save(self._store, {"fault": kind, "gray": step.gray, "purpose": step.purpose, "t_s": round(t_s, 9),
                                 "message": message})

    def _checkpoint(self, key: str, t_s: float) -> None:
        self._save(self._store, {"checkpoint": key, "session": self.session, "t_s": round(t_s, 9)})
        self._save(self._unit_done, key)

    def _store(self, record: dict) -> None:
        if self.journal is not None:
            self.journal.append(record)

    def _unit_done(self, key: str) -> None:
        self._units_done += 1
        self.publish({"event": "unit", "key": key, "done": self._units_done, "total": self._stage_total})
