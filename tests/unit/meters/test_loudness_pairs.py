"""Two loudness meters in step (a file's input and output, LoudnessMeter.follow): the same figures.

The reference is the same meters unpaired: pairing only changes how the K-weighting runs (both
meters' rows in one pass), so every figure and the gating histogram must be the same bits; the
meters themselves are checked against ITU-R BS.1770-4 and EBU Tech 3341/3342 in test_loudness.py.
"""
from __future__ import annotations

import numpy as np
import pytest

from chainrun.meters import MeterBank
from chainrun.meters.loudness import LoudnessMeter


def _signals(seconds=7.3, rate=48000, seed=3):
    rng = np.random.default_rng(seed)
    n = int(seconds * rate)
    a = rng.standard_normal((2, n)) * 0.1
    a[:, n // 2:n // 2 + rate] = 0.0                       # silence: the states decay, are flushed
    b = np.cumsum(rng.standard_normal((2, n)), axis=1) * 0.001
    return a, b


def _figures(meter):
    r = meter.reading()
    count, power = meter.gating_histogram()
    return (r.integrated_lufs, r.loudness_range_lu, r.max_momentary_lufs, r.max_short_term_lufs, r.frames,
            count.tobytes(), power.tobytes())


@pytest.mark.parametrize("block", [65536, 10000, 100000, 48000 * 8])
def test_meters_in_step_give_the_figures_of_meters_apart(block):
    # blocks that end on, before and after the flush points at multiples of 65536 frames
    x, y = _signals()
    lead, follow = LoudnessMeter(48000, 2), LoudnessMeter(48000, 2)
    assert follow.follow(lead)
    apart_x, apart_y = LoudnessMeter(48000, 2), LoudnessMeter(48000, 2)
    for i in range(0, x.shape[1], block):
        lead.update(x[:, i:i + block])
        apart_x.update(x[:, i:i + block])
        if i == 2 * block:                                  # a reading in mid-stream, the follower's block due
            assert _figures(lead) == _figures(apart_x)
        follow.update(y[:, i:i + block])
        apart_y.update(y[:, i:i + block])
    follow.unfollow()
    assert _figures(lead) == _figures(apart_x) and _figures(follow) == _figures(apart_y)


def test_a_leader_with_a_block_waiting_is_right_whatever_happens_next():
    x, y = _signals(3.0)
    lead, follow = LoudnessMeter(48000, 2), LoudnessMeter(48000, 2)
    apart_x, apart_y = LoudnessMeter(48000, 2), LoudnessMeter(48000, 2)
    assert follow.follow(lead)
    lead.update(x[:, :50000])
    apart_x.update(x[:, :50000])
    follow.update(y[:, :40000])                             # not the leader's frames: each on its own
    apart_y.update(y[:, :40000])
    lead.update(x[:, 50000:90000])                          # then the follower never comes
    apart_x.update(x[:, 50000:90000])
    follow.unfollow()
    assert _figures(lead) == _figures(apart_x) and _figures(follow) == _figures(apart_y)


def test_only_meters_that_can_go_together_are_paired():
    a, b = LoudnessMeter(48000, 2), LoudnessMeter(48000, 2)
    assert not a.follow(a)
    assert not a.follow(LoudnessMeter(44100, 2))            # another rate: another filter
    assert not a.follow(LoudnessMeter(48000, 1, channel_mask=0x8))   # LFE only: nothing to weight
    assert a.follow(b) and not LoudnessMeter(48000, 2).follow(b)     # one follower at a time
    assert not MeterBank(48000, 2, loudness=False).follow(MeterBank(48000, 2, loudness=True))


def test_meter_banks_in_step_read_as_apart():
    x, y = _signals(4.0, seed=5)
    lead, follow = MeterBank(48000, 2, loudness=True), MeterBank(48000, 2, loudness=True)
    apart = MeterBank(48000, 2, loudness=True), MeterBank(48000, 2, loudness=True)
    assert follow.follow(lead)
    for i in range(0, x.shape[1], 65536):
        for m, blk in ((lead, x), (follow, y), (apart[0], x), (apart[1], y)):
            m.update(np.ascontiguousarray(blk[:, i:i + 65536]))
    follow.unfollow()
    assert lead.result().to_dict() == apart[0].result().to_dict()
    assert follow.result().to_dict() == apart[1].result().to_dict()
