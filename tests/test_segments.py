"""Segment-parallel analysis: frame ranges decode exactly, and a segmented log is the same
for any number of workers (local processes or a Dask cluster)."""

from __future__ import annotations

import numpy as np
import pytest

from stabilize import runner, segments
from stabilize.io import iter_frame_range, iter_frames, probe
from stabilize.jobs import measure

from .conftest import noise_frames, write_clip

KEYFRAME = 20


@pytest.fixture(scope="module")
def long_clip(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("segments")
    return write_clip(tmp / "long.mp4", noise_frames(70, 160, 120, shift_px=1.3), 30.0)


@pytest.fixture(scope="module")
def one_worker(long_clip):
    return measure(long_clip, workers=1, keyframe_every=KEYFRAME)


@pytest.mark.parametrize(("start", "stop"), [(0, 7), (5, 20), (40, None), (69, None),
                                             (75, None)])
def test_frame_range_matches_a_full_decode(long_clip, start, stop):
    info = probe(long_clip)
    full = list(iter_frames(long_clip, size=(80, 60), gray=True, info=info))
    got = list(iter_frame_range(long_clip, start, stop, size=(80, 60), gray=True, info=info))
    ref = full[start:stop]
    assert [f.index for f in got] == [f.index for f in ref]
    assert [f.time_s for f in got] == [f.time_s for f in ref]
    assert all(np.array_equal(a.image, b.image) for a, b in zip(got, ref, strict=True))


def test_plan_splits_at_keyframes():
    # Several workers: one run per keyframe interval, handed out as workers come free.
    assert segments.plan_segments(70, 20, 2) == [(0, 20), (20, 40), (40, 60), (60, None)]
    assert segments.plan_segments(70, 20, 8) == [(0, 20), (20, 40), (40, 60), (60, None)]
    assert segments.plan_segments(5, 20, 2) == [(0, None)]
    # One worker: one pass over the whole clip.
    assert segments.plan_segments(70, 20, 1) == [(0, None)]


def test_two_local_workers_give_the_same_log(long_clip, one_worker):
    two = measure(long_clip, workers=2, keyframe_every=KEYFRAME)
    assert two.frames == one_worker.frames == 70
    assert np.abs(two.matrices - one_worker.matrices).max() < 1e-6
    assert two.to_csv() == one_worker.to_csv()


def test_a_clip_of_one_interval_starts_no_pool(long_clip, one_worker, monkeypatch):
    def no_pool(*args, **kwargs):
        raise AssertionError("a pool was started for a single run")

    monkeypatch.setattr(runner, "_pool_map", no_pool)
    whole = measure(long_clip, workers=2, keyframe_every=100)
    assert whole.frames == 70
    # The same log as one worker gives.
    assert whole.to_csv() == measure(long_clip, workers=1, keyframe_every=100).to_csv()


def test_progress_counts_every_kept_frame_once(long_clip, one_worker):
    counts = []

    class Bar:
        def update(self, n=1):
            counts.append(n)

        def close(self):
            pass

    log = measure(long_clip, workers=2, keyframe_every=KEYFRAME,
                  progress=lambda desc, total: Bar())
    assert sum(counts) == log.frames == 70
    assert log.to_csv() == one_worker.to_csv()


def _count_in_worker(n: int) -> int:
    counter = runner.ProgressCounter(skip=1)
    for _ in range(n):
        counter(1)
    counter.flush()
    return n


def test_pool_workers_report_progress_per_item():
    got: dict[int, int] = {}

    def on_progress(i, n):
        got[i] = got.get(i, 0) + n

    results = dict(runner.parallel_map(_count_in_worker, [5, 9, 3], workers=2,
                                         on_progress=on_progress))
    assert results == {0: 5, 1: 9, 2: 3}
    # Each item's counts, less the one frame skipped (the overlap a later run re-reads).
    assert got == {0: 4, 1: 8, 2: 2}


def test_progress_counter_skips_and_sends_in_batches(monkeypatch):
    sent = []

    class Queue:
        def put(self, item):
            sent.append(item)

    monkeypatch.setattr(runner, "_progress_queue", Queue())
    monkeypatch.setattr(runner, "_current_item", [7])
    monkeypatch.setattr(runner, "PROGRESS_EVERY_S", 3600.0)
    counter = runner.ProgressCounter(skip=2)
    for _ in range(5):
        counter(1)
    assert sent == []  # not due yet
    counter.flush()
    counter.flush()  # nothing more to send
    assert sent == [(7, 3)]
    # A run that reads on past its end (the follow-through) counts only its own frames.
    capped = runner.ProgressCounter(skip=2, cap=4)
    for n in (1, 3, 2, 1):
        capped(n)
    capped.flush()
    assert sent == [(7, 3), (7, 4)]


def test_dask_local_cluster_gives_the_same_log(long_clip, one_worker):
    pytest.importorskip("distributed")
    two = measure(long_clip, workers=2, scheduler="local", keyframe_every=KEYFRAME)
    assert two.to_csv() == one_worker.to_csv()


def test_ranges_in_any_grouping_merge_to_the_same_track(long_clip, one_worker):
    from stabilize.config import Settings
    from stabilize.io.decode import analysis_size

    info = probe(long_clip)
    st = Settings()
    size = analysis_size(info, st.analysis_width)
    tasks = [segments.SegmentTask(str(long_clip), info, size, st, s, e, KEYFRAME)
             for s, e in [(0, 20), (20, 60), (60, None)]]
    merged = segments.merge([segments.fit_segment(t) for t in reversed(tasks)], st,
                            (info.width, info.height))
    assert np.array_equal(merged.matrices, one_worker.matrices)
    assert np.array_equal(merged.time_s, one_worker.time_s)


def test_segmented_log_equals_the_single_pass(long_clip):
    single = measure(long_clip)
    k = segments.keyframe_frames(probe(long_clip).fps)
    two = measure(long_clip, workers=2, keyframe_every=k)
    assert np.abs(two.matrices - single.matrices).max() < 1e-6
    assert two.to_csv() == single.to_csv()


def test_frame_range_seeks_instead_of_decoding_from_the_start(tmp_path, monkeypatch):
    # A clip with B-frames and a range running past where the timestamp listing stops:
    # the range must come from the seek, not from the fallback that decodes everything
    # before it (exact too, but as slow as a full pass).
    import stabilize.io.seek as seek

    clip = write_clip(tmp_path / "bframes.mp4", noise_frames(220, 96, 64, shift_px=0.9), 30.0)
    info = probe(clip)
    ref = list(iter_frames(clip, size=(96, 64), gray=True, info=info))[100:200]
    calls = []
    real = seek.iter_frames
    monkeypatch.setattr(seek, "iter_frames", lambda *a, **k: calls.append(1) or real(*a, **k))
    got = list(seek.iter_frame_range(clip, 100, 200, size=(96, 64), gray=True, info=info))
    assert [f.index for f in got] == list(range(100, 200))
    assert [f.time_s for f in got] == [f.time_s for f in ref]
    assert all(np.array_equal(a.image, b.image) for a, b in zip(got, ref, strict=True))
    assert len(calls) == 1  # only the look at frame 0 that learns the timestamp offset


def test_frame_range_seeks_in_a_variable_rate_clip(tmp_path, monkeypatch):
    # Irregular frame times (as phones and some drones write): the frames before the range
    # are dropped inside ffmpeg by their time, and the range still comes from the seek.
    import stabilize.io.seek as seek
    from stabilize.io import VideoWriter

    rng = np.random.default_rng(5)
    times = np.concatenate([[0.0], np.cumsum(rng.integers(200, 900, 159))]) / 15360
    clip = tmp_path / "vfr.mp4"
    with VideoWriter(clip, 96, 64, 30.0, preset="veryfast", times_s=times,
                     time_base=15360) as w:
        for f in noise_frames(160, 96, 64, shift_px=0.7):
            w.write(f)
    info = probe(clip)
    ref = list(iter_frames(clip, size=(96, 64), gray=True, info=info))
    calls = []
    real = seek.iter_frames
    monkeypatch.setattr(seek, "iter_frames", lambda *a, **k: calls.append(1) or real(*a, **k))
    for start, stop in ((37, 90), (121, None)):
        calls.clear()
        got = list(seek.iter_frame_range(clip, start, stop, size=(96, 64), gray=True,
                                          info=info))
        want = ref[start:stop]
        assert [f.index for f in got] == [f.index for f in want]
        assert [f.time_s for f in got] == [f.time_s for f in want]
        assert all(np.array_equal(a.image, b.image) for a, b in zip(got, want, strict=True))
        assert len(calls) == 1
