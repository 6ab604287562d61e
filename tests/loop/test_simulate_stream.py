"""`howl simulate` as a stream: the same output as the whole program at once, memory that does not grow."""

from __future__ import annotations

import itertools
import tracemalloc

import numpy as np
import pytest
import soundfile as sf

from howl.loop.mimo import loop_matrix
from howl.loop.simulate import GainSchedule, PairwiseSum, simulate_closed_loop, simulate_mimo, stream_closed_loop

FS = 8000


def _loop_ir(n=1600, delay=23, seed=7):
    rng = np.random.default_rng(seed)
    h = np.zeros(n)
    h[delay] = 0.3
    h[delay + 1 :] = rng.standard_normal(n - delay - 1) * np.exp(-np.arange(n - delay - 1) / 300.0) * 0.05
    h[delay + 5] -= h.sum()  # no DC gain, as a real loop
    return h


def _pieces(x, sizes):
    sizes = itertools.cycle(sizes)
    i = 0
    while i < x.shape[1]:
        k = next(sizes)
        yield x[:, i : i + k]
        i += k


def test_streamed_output_is_the_whole_program_output_bit_for_bit():
    # derived: the engine does the same arithmetic whatever the chunks, so equality is exact
    h = _loop_ir(6000)
    x = np.random.default_rng(1).standard_normal(70001) * 0.1
    g = np.linspace(-6.0, 4.0, x.size)
    ref = simulate_closed_loop(h, x, FS, gain_db=g)
    got = np.concatenate(list(stream_closed_loop(h[None, None, :], _pieces(x[None], [1, 4999, 333, 20000]),
                                                 lambda a, b: g[a:b])), axis=1)[0]
    assert np.array_equal(got, ref)


def test_streamed_mimo_output_is_the_whole_program_output_bit_for_bit():
    rng = np.random.default_rng(2)
    irs = np.stack([np.stack([_loop_ir(800, 17 + 3 * s + m, seed=s * 2 + m) for m in range(2)]) for s in range(2)])
    mix = np.array([[0.5, 0.3], [0.2, 0.6]])
    x = rng.standard_normal((2, 30011)) * 0.1
    ref = simulate_mimo(irs, mix, x, FS, gain_db=2.0)
    got = np.concatenate(list(stream_closed_loop(loop_matrix(irs, mix), _pieces(x, [4096, 123]),
                                                 lambda a, b: np.full(b - a, 2.0))), axis=1)
    assert np.array_equal(got, ref)


@pytest.mark.parametrize("n", [1, 2, 9, 1000, 300007])
@pytest.mark.parametrize("kind", ["ramp", "flat_ramp", "steps", "const"])
def test_the_schedule_in_pieces_is_the_schedule_whole(n, kind):
    # reference: numpy.linspace for the ramp (what the schedule was built with), a plain fill for the steps
    kw = {"ramp": {"ramp_db": (-3.0, 9.6)}, "flat_ramp": {"ramp_db": (2.0, 2.0)},
          "steps": {"steps": [(0.5, 3.0), (0.0, -1.0), (90.0, 4.0)]}, "const": {"gain_db": -2.5}}[kind]
    if kind.endswith("ramp"):
        ref = np.linspace(*kw["ramp_db"], n)
    elif kind == "steps":
        ref = np.full(n, -1.0)
        ref[min(n, 500) :] = 3.0
        ref[min(n, 90000) :] = 4.0
    else:
        ref = np.full(n, -2.5)
    s = GainSchedule(n, 1000.0, **kw)
    cuts = sorted({0, n, *np.random.default_rng(n).integers(0, n, 6).tolist()})
    assert np.array_equal(np.concatenate([s.values(a, b) for a, b in zip(cuts[:-1], cuts[1:])]), ref)


@pytest.mark.parametrize("n", [1, 127, 128, 129, 8193, 1234567])
def test_pairwise_sum_in_pieces_is_numpy_sum(n):
    # reference: numpy.sum of the whole array (pairwise summation)
    v = np.random.default_rng(n).standard_normal(n) ** 2
    ps = PairwiseSum(n, leaf=4096)
    for c in np.array_split(v, 7):
        ps.add(c)
    assert ps.total() == np.sum(v)


def _peak_bytes(tmp_path, seconds):
    from howl.cli.simulate import run_simulation

    ir, prog, out = tmp_path / "ir.wav", tmp_path / f"prog{seconds}.wav", tmp_path / f"out{seconds}.wav"
    sf.write(ir, _loop_ir(), FS, subtype="FLOAT")
    rng = np.random.default_rng(seconds)
    with sf.SoundFile(prog, "w", FS, 1, subtype="FLOAT") as f:
        for _ in range(seconds):
            f.write(rng.standard_normal(FS) * 0.05)
    tracemalloc.start()
    try:
        rep = run_simulation(ir, prog, out, ramp_db=(-12.0, 0.0), tail_s=0.5)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert sf.info(out).frames == seconds * FS + FS // 2
    return peak, rep


def test_simulate_memory_does_not_grow_with_the_program(tmp_path):
    short, _ = _peak_bytes(tmp_path, 20)
    long, rep = _peak_bytes(tmp_path, 80)
    assert rep["duration_s"] == pytest.approx(80.5)
    # derived: a run that held the program would grow by at least one float64 copy of the 60 s added
    # (60 · 8000 · 8 B = 3.8 MB; held as program, schedule and output, three times that); a stream does
    # not grow: allow a quarter of one copy
    assert long - short < 60 * FS * 8 / 4
