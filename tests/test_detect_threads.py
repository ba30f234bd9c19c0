"""The detector's threads change its speed, never its answer.

Independent pieces of one detection (orientation sectors of the ridge filter, Hough
transforms of the sectors) run in threads where OpenCV may use several
(``tracefit.image.threads``). These tests run the same inputs with the pieces forced one at a
time in the calling thread and with three threads, and require results equal to the last
digit. The images are the package's own synthetic micrographs and the numpy-drawn strain-like
maps of ``tests/test_detect_strainmaps.py``; what is compared is the detector against itself
(common practice, no source: a parallel run must reproduce the serial one exactly).
"""

from __future__ import annotations

import threading

import numpy as np
import pytest

import tracefit.image.threads as threads
from tests.test_detect_strainmaps import band_field
from tracefit.image import BandFamilySpec, detect_bands, detect_grains, render_micrograph, voronoi_labels


def _as_tuple(res):
    return (res.verdict, res.reason, [(f.angle_deg, f.angle_sigma_deg, f.n_bands, f.spacing_px, f.log10_nfa,
                                       f.strength, f.contrast, [tuple(vars(ln).values()) for ln in f.lines])
                                      for f in res.families])


def _both(monkeypatch, run):
    monkeypatch.setattr(threads, "_threads", lambda: 1)
    one = run()
    calls = []
    real = threads.ThreadPoolExecutor

    class Counting(real):
        def submit(self, *a, **k):
            calls.append(1)
            return super().submit(*a, **k)

    monkeypatch.setattr(threads, "_threads", lambda: 3)
    monkeypatch.setattr(threads, "ThreadPoolExecutor", Counting)
    monkeypatch.setattr(threads, "_pool", None)
    many = run()
    assert calls, "the threaded run used no threads: the comparison would prove nothing"
    return one, many


def test_micrograph_same_answer_with_threads(monkeypatch):
    img, _ = render_micrograph((768, 1024), [BandFamilySpec(23.4, 30, 3, -0.3), BandFamilySpec(101.7, 22, 2.5, 0.3),
                                             BandFamilySpec(152.2, 40, 4, -0.25)], noise_sigma=0.03, seed=5)
    one, many = _both(monkeypatch, lambda: detect_bands(img))
    assert len(one.families) == 3
    assert _as_tuple(one) == _as_tuple(many)


def test_strain_map_grains_same_answer_with_threads(monkeypatch):
    shape = (160, 240)
    labels = voronoi_labels(shape, 8, seed=2)
    rng = np.random.default_rng(6)
    img = np.zeros(shape, np.float32)
    for g in range(8):
        a = float(rng.uniform(0, 180))
        m = labels == g
        img[m] = band_field(shape, [(a, 8.0), ((a + 65) % 180, 10.0)], seed=20 + g)[m]
    img[30:34, 50:90] = np.nan
    one, many = _both(monkeypatch, lambda: detect_grains(img, labels, min_pixels=300))
    assert sum(len(r.families) for r in one.values()) >= 4
    assert {g: _as_tuple(r) for g, r in one.items()} == {g: _as_tuple(r) for g, r in many.items()}


def test_ordered_map_keeps_order_and_runs_nested_calls_in_turn(monkeypatch):
    monkeypatch.setattr(threads, "_threads", lambda: 2)
    monkeypatch.setattr(threads, "_pool", None)
    seen = []

    def outer(x):
        # a call from inside a pool thread runs in that thread (no waiting on its own pool)
        inner = threads.ordered_map(lambda y: (y, threading.current_thread().name), range(3))
        seen.extend(name for _, name in inner)
        return x * 10 + sum(y for y, _ in inner)

    assert threads.ordered_map(outer, range(6)) == [x * 10 + 3 for x in range(6)]
    assert seen and all(name.startswith("tracefit") for name in seen)


def test_one_thread_runs_in_the_caller(monkeypatch):
    monkeypatch.setattr(threads, "_threads", lambda: 1)
    names = threads.ordered_map(lambda _: threading.current_thread().name, range(4))
    assert names == [threading.current_thread().name] * 4


@pytest.mark.parametrize("n", [0, 1])
def test_empty_and_single_items(monkeypatch, n):
    monkeypatch.setattr(threads, "_threads", lambda: 2)
    assert threads.ordered_map(lambda x: x + 1, range(n)) == [x + 1 for x in range(n)]


@pytest.mark.skipif(not hasattr(__import__("os"), "fork"), reason="needs os.fork")
def test_forked_child_gets_a_pool_of_its_own(monkeypatch):
    import multiprocessing as mp

    monkeypatch.setattr(threads, "_threads", lambda: 2)
    assert threads.ordered_map(lambda x: x * 2, range(4)) == [0, 2, 4, 6]  # the parent's pool exists now
    ctx = mp.get_context("fork")
    with ctx.Pool(1) as pool:
        # the child's copy of the parent's pool has no threads; without a fresh one this hangs
        got = pool.apply_async(_child_map).get(timeout=60)
    assert got == [1, 2, 3, 4]


def _child_map():
    threads._threads = lambda: 2
    return threads.ordered_map(lambda x: x + 1, range(4))
