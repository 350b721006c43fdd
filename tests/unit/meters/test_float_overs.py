"""Float samples over full scale: counted apart from clipping (issue 18, item 2).

A FLOAT or DOUBLE file keeps a sample of, say, +8.9 (+19 dBFS) as it is: a gain brings it back
under full scale, so it is not clipped. The meter counts such samples (|x| > 1.0, strictly: a
sample of exactly +-1.0 is at full scale, not over it) as ``over_samples`` when told the stream is
float (``over_level``: where its encoding stores a value past 1.0), and counts nothing as clipped when the clip level is infinite
(:func:`chainrun.audio.formats.clip_level` of a float subtype).
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from chainrun.audio.formats import clip_level, full_scale, is_float, over_level
from chainrun.meters import ChannelReading, MeterBank


def meter(x: np.ndarray, splits=(), **kw):
    x = np.atleast_2d(np.asarray(x, dtype=np.float64))
    m = MeterBank(48000, x.shape[0], **kw)
    edges = [0, *sorted(splits), x.shape[1]]
    for a, b in zip(edges[:-1], edges[1:]):
        m.update(np.ascontiguousarray(x[:, a:b]))
    return m.result()


def test_float_subtypes_clip_nowhere_and_integer_ones_at_their_largest_code():
    # analytic: b-bit PCM's largest code is (2**(b-1) - 1) / 2**(b-1); a float encoding holds any finite value
    assert clip_level("PCM_24") == full_scale("PCM_24") == (2 ** 23 - 1) / 2 ** 23
    assert clip_level("PCM_16") == (2 ** 15 - 1) / 2 ** 15
    assert clip_level("FLOAT") == clip_level("DOUBLE") == math.inf
    assert is_float("FLOAT") and is_float("DOUBLE")
    assert not any(is_float(s) for s in ("PCM_16", "PCM_24", "PCM_32", "ULAW", "nonsense"))


def test_where_each_subtype_stores_a_value_over_full_scale():
    # IEEE 754 binary32, round to nearest, ties to even: the next float32 above 1.0 is 1 + 2**-23, so
    # float64 values up to the halfway point 1 + 2**-24 are stored as 1.0 (the tie goes to 1.0's even
    # significand); numpy's float32 conversion is the reference here
    assert over_level("FLOAT") == 1.0 + 2.0 ** -24
    assert np.float32(1.0 + 2.0 ** -24) == 1.0 and np.float32(np.nextafter(1.0 + 2.0 ** -24, 2.0)) > 1.0
    assert over_level("DOUBLE") == 1.0
    assert over_level("PCM_24") == over_level("PCM_16") == math.inf        # integer PCM clips, it keeps no overs


def test_a_value_a_float32_file_stores_as_one_is_not_over():
    # a gain that lands one float64 rounding above 1.0: a FLOAT file stores 1.0 there, a DOUBLE file does not
    x = np.array([0.0, np.nextafter(1.0, 2.0), 1.0 + 2.0 ** -23, 0.0])
    assert meter(x, full_scale=math.inf, over_level=over_level("FLOAT")).channels[0].over_samples == 1
    assert meter(x, full_scale=math.inf, over_level=over_level("DOUBLE")).channels[0].over_samples == 2


@pytest.mark.parametrize("splits", [(), (3,), (1, 2, 5, 6, 9)])
def test_overs_are_counted_strictly_past_one_and_never_as_clipped(splits):
    hot = 10 ** (19 / 20)             # analytic: +19 dBFS = 10**(19/20) = 8.9125
    x = np.array([0.0, 1.0, -1.0, hot, hot, 0.5, -hot, 1.0000001, -0.9999999, 0.0, 2.0])
    ch = meter(x, splits=splits, full_scale=math.inf, over_level=1.0).channels[0]
    # analytic: |x| > 1.0 at frames 3, 4, 6, 7, 10; exactly +-1.0 is at full scale, not over
    assert ch.over_samples == 5
    assert ch.clipped_samples == 0 and ch.clipped_regions == () and ch.clipped_region_count == 0
    assert ch.peak_dbfs == pytest.approx(19.0, abs=1e-9)       # analytic: the overs' peak is the sample peak


def test_a_sine_touching_one_is_not_over():
    # analytic: a sine at rate/4 with zero phase is exactly 0, 1, 0, -1, ...
    x = np.tile([0.0, 1.0, 0.0, -1.0], 3000)
    ch = meter(x, splits=(4097,), full_scale=math.inf, over_level=1.0).channels[0]
    assert ch.over_samples == 0 and ch.clipped_samples == 0 and ch.peak == 1.0


def test_non_finite_samples_are_not_overs():
    x = np.array([np.inf, -np.inf, np.nan, 3.0, 0.0])
    ch = meter(x, full_scale=math.inf, over_level=1.0).channels[0]
    assert ch.over_samples == 1 and ch.nonfinite_samples == 3 and ch.clipped_samples == 0


def test_without_float_overs_nothing_is_counted_over_and_pcm_clipping_is_unchanged():
    fs24 = (2 ** 23 - 1) / 2 ** 23
    x = np.array([0.0, fs24, fs24, 0.0, -1.0, 0.2])
    ch = meter(x, full_scale=fs24).channels[0]
    # chainrun's own rule (MeterBank docstring), common practice, no published source: every sample at
    # the largest code or at -1.0 is clipped, and consecutive ones form a region
    assert ch.clipped_samples == 3 and ch.clipped_regions == ((1, 2), (4, 1)) and ch.over_samples == 0


def test_a_clip_ceiling_on_a_float_stream_counts_both():
    # Clip policy on a float output: samples held at the ceiling are clipped (by chainrun); past 1.0 is over
    x = np.array([0.5, 0.5, 0.9, 1.5, 0.0])
    ch = meter(x, full_scale=0.5, over_level=1.0).channels[0]
    assert ch.clipped_samples == 4 and ch.over_samples == 1        # analytic: |x| >= 0.5 four times; > 1 once


def test_the_over_count_is_kept_in_the_reading_dict_and_read_back():
    ch = meter(np.array([0.0, 4.0, -4.0]), full_scale=math.inf, over_level=1.0).channels[0]
    d = ch.to_dict()
    assert d["over_samples"] == 2
    assert ChannelReading.from_dict(d) == ch
    older = {k: v for k, v in d.items() if k != "over_samples"}      # a journal written before the count existed
    assert ChannelReading.from_dict(older).over_samples == 0


def test_the_headline_sums_overs_over_channels():
    x = np.array([[2.0, 0.0, 2.0], [0.0, -3.0, 0.0]])
    r = meter(x, full_scale=math.inf, over_level=1.0)
    assert r.headline()["over_samples"] == 3 and r.headline()["clipped_samples"] == 0


def test_an_infinite_clip_level_is_allowed_and_nan_or_zero_still_refused():
    MeterBank(48000, 1, full_scale=math.inf)
    for bad in (float("nan"), 0.0, -math.inf):
        with pytest.raises(ValueError):
            MeterBank(48000, 1, full_scale=bad)
        with pytest.raises(ValueError):
            MeterBank(48000, 1, over_level=bad)
