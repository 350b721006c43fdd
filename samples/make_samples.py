"""Synthesise the chainrun demo recordings of "The Boathouse Hour".

Everything here is synthetic and invented. "The Boathouse Hour" is a fictional
programme on the fictional station Saltings Community Radio, presented by the
fictional Ysolde Marrack; her guest is the fictional reed-cutter Aldous Fenwray.
The programme is recorded in the old boathouse on Pellory Creek and out on the
Pellory saltmarsh, both invented places. No sound in this folder was recorded:
every sample is computed by this script from numpy noise, sine waves and
filters.

Files written (paths relative to this folder):

``marsh/dawn_ambience.wav``
    Stereo, 48 kHz, WAV PCM_24, 3 s. Dawn on the saltmarsh: wind rumble on the
    microphones (most of its energy below 40 Hz), the outside-broadcast
    generator's 50 Hz hum and harmonics in the distance, a broadband wash of
    water and reeds, and a few bird-like chirps.
``marsh/slipway_generator.flac``
    Mono, 44.1 kHz, FLAC PCM_24, 3 s. Beside the generator on the slipway: a
    strong 50 Hz hum with harmonics at 100, 150, 200 Hz and up, a slight speed
    drift, over lighter wind rumble and water.
``boathouse/host_stem.wav``
    Mono, 48 kHz, WAV PCM_24, 3.2 s. The host's microphone: a speech-like
    question (glottal pulses with a moving pitch through vowel formants, at a
    syllable rate, with pauses), then boathouse room tone while the guest
    answers.
``boathouse/guest_stem.wav``
    Mono, 48 kHz, WAV FLOAT, 3.2 s. The guest's microphone: room tone and
    low-frequency thumps of footsteps on the boards while the host asks, then
    the speech-like answer, with a little hum from the generator-fed
    mains throughout.
``boathouse/interview_mix.wav``
    Stereo, 44.1 kHz, WAV PCM_16, 3.2 s. The two stems panned apart and
    resampled to 44.1 kHz, as a delivery mix.

Levels are those of careful field and studio recording: sample peaks between
-12 and -3 dBFS and true peaks below -1 dBTP, so a gentle equaliser chain
leaves every file unclipped. ``main`` refuses to write a file outside those
limits.

Run ``python samples/make_samples.py`` from the repository root (or from
anywhere) to regenerate every file; it writes only into this folder. Every
random choice comes from the fixed seed below, so two runs with the same numpy,
scipy and libsndfile give byte-identical files. libsndfile stamps the PEAK chunk of
a float WAV file with the current time, so the float file is written with
``scipy.io.wavfile``, which writes no timestamp; the others are written with
soundfile.
"""

from __future__ import annotations

import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import soundfile as sf
from scipy import signal
from scipy.io import wavfile

HERE = Path(__file__).resolve().parent
SEED = 20250611
MAINS_HZ = 50.0

PEAK_LIMITS_DBFS = (-12.0, -3.0)
TRUE_PEAK_LIMIT_DBTP = -1.0

# Vowel formants (F1, F2, F3) in Hz and bandwidths in Hz, typical adult values.
VOWELS = {
    "a": ((730.0, 1090.0, 2440.0), (90.0, 110.0, 170.0)),
    "e": ((530.0, 1840.0, 2480.0), (70.0, 100.0, 160.0)),
    "i": ((290.0, 2250.0, 2890.0), (60.0, 100.0, 180.0)),
    "o": ((570.0, 840.0, 2410.0), (80.0, 90.0, 160.0)),
    "u": ((320.0, 870.0, 2240.0), (60.0, 90.0, 150.0)),
    "er": ((490.0, 1350.0, 1690.0), (70.0, 100.0, 140.0)),
}


@dataclass(frozen=True)
class Voice:
    """Parameters of one synthetic talker.

    Attributes
    ----------
    pitch_hz : float
        Typical fundamental frequency of the voice.
    formant_scale : float
        Factor applied to every formant frequency (shorter vocal tract > 1).
    breathiness : float
        Level of aspiration noise relative to the voiced source.
    """

    pitch_hz: float
    formant_scale: float
    breathiness: float


HOST = Voice(pitch_hz=195.0, formant_scale=1.15, breathiness=0.04)
GUEST = Voice(pitch_hz=112.0, formant_scale=1.0, breathiness=0.09)


# --------------------------------------------------------------------------
# Generic building blocks
# --------------------------------------------------------------------------


def rng_for(name: str) -> np.random.Generator:
    """Return a random generator seeded from SEED and a stable name.

    Parameters
    ----------
    name : str
        Name of the sound; each name has its own reproducible stream, so
        adding or reordering sounds does not change the others.

    Returns
    -------
    numpy.random.Generator
        Generator seeded with ``[SEED, crc32(name)]``.
    """
    return np.random.default_rng([SEED, zlib.crc32(name.encode("utf-8"))])


def filtered_noise(
    rng: np.random.Generator,
    shape: tuple[int, ...],
    fs: int,
    band: tuple[float | None, float | None],
    order: int = 4,
) -> np.ndarray:
    """White Gaussian noise through a Butterworth filter, scaled to unit RMS.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the noise.
    shape : tuple of int
        Output shape, frames first.
    fs : int
        Sample rate in Hz.
    band : tuple of (float or None, float or None)
        Lower and upper band edges in Hz; ``None`` leaves that side open.
    order : int, optional
        Butterworth order of each filter side.

    Returns
    -------
    numpy.ndarray
        Filtered noise with unit RMS over the whole array.
    """
    low, high = band
    warm_up = fs  # one second, discarded, so the filter starts in its steady state
    noise = rng.standard_normal((shape[0] + warm_up,) + shape[1:])
    if low is not None and high is not None:
        sos = signal.butter(order, (low, high), btype="bandpass", fs=fs, output="sos")
    elif low is not None:
        sos = signal.butter(order, low, btype="highpass", fs=fs, output="sos")
    else:
        sos = signal.butter(order, high, btype="lowpass", fs=fs, output="sos")
    shaped = signal.sosfilt(sos, noise, axis=0)[warm_up:]
    return shaped / np.sqrt(np.mean(shaped**2))


def slow_envelope(
    rng: np.random.Generator, n: int, fs: int, rate_hz: float, depth: float
) -> np.ndarray:
    """Random, smoothly varying gain around 1.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the variation.
    n : int
        Number of frames.
    fs : int
        Sample rate in Hz.
    rate_hz : float
        Rough rate of change; knots are placed this many times a second.
    depth : float
        Relative swing; the gain stays within ``1 +- depth``.

    Returns
    -------
    numpy.ndarray
        Positive gain curve of length ``n``.
    """
    knots = int(np.ceil(n / fs * rate_hz)) + 2
    knot_times = np.linspace(0.0, n / fs, knots)
    values = rng.uniform(-1.0, 1.0, knots)
    t = np.arange(n) / fs
    # Raised-cosine easing between neighbouring knots: smooth, no overshoot.
    idx = np.clip(np.searchsorted(knot_times, t, side="right") - 1, 0, knots - 2)
    frac = (t - knot_times[idx]) / (knot_times[idx + 1] - knot_times[idx])
    eased = 0.5 - 0.5 * np.cos(np.pi * frac)
    curve = values[idx] + (values[idx + 1] - values[idx]) * eased
    return 1.0 + depth * curve


def pan(mono: np.ndarray, position: float) -> np.ndarray:
    """Constant-power pan of a mono signal to two channels.

    Parameters
    ----------
    mono : numpy.ndarray
        Signal of shape ``(n,)``.
    position : float
        -1 is hard left, 0 centre, +1 hard right.

    Returns
    -------
    numpy.ndarray
        Stereo signal of shape ``(n, 2)``.
    """
    angle = (position + 1.0) * np.pi / 4.0
    return np.stack([mono * np.cos(angle), mono * np.sin(angle)], axis=1)


def fade_edges(x: np.ndarray, fs: int, seconds: float = 0.02) -> np.ndarray:
    """Apply short raised-cosine fades at both ends so files start and end at rest.

    Parameters
    ----------
    x : numpy.ndarray
        Signal, frames first.
    fs : int
        Sample rate in Hz.
    seconds : float, optional
        Fade length.

    Returns
    -------
    numpy.ndarray
        Faded copy of ``x``.
    """
    n = int(seconds * fs)
    ramp = 0.5 - 0.5 * np.cos(np.pi * np.arange(n) / n)
    gain = np.ones(x.shape[0])
    gain[:n] = ramp
    gain[-n:] = ramp[::-1]
    return x * gain.reshape((-1,) + (1,) * (x.ndim - 1))


def scale_to_peak(x: np.ndarray, peak_dbfs: float) -> np.ndarray:
    """Scale a signal so that its largest absolute sample sits at ``peak_dbfs``.

    Parameters
    ----------
    x : numpy.ndarray
        Signal, any shape.
    peak_dbfs : float
        Target sample peak in dB relative to full scale.

    Returns
    -------
    numpy.ndarray
        Scaled copy of ``x``.
    """
    return x * (10.0 ** (peak_dbfs / 20.0) / np.max(np.abs(x)))


def sample_peak_dbfs(x: np.ndarray) -> float:
    """Largest absolute sample in dBFS.

    Parameters
    ----------
    x : numpy.ndarray
        Signal, any shape.

    Returns
    -------
    float
        ``20 log10(max |x|)``.
    """
    return float(20.0 * np.log10(np.max(np.abs(x))))


def true_peak_dbtp(x: np.ndarray) -> float:
    """Estimate the true (inter-sample) peak by 4x oversampling.

    Parameters
    ----------
    x : numpy.ndarray
        Signal, frames first.

    Returns
    -------
    float
        Peak of the 4x polyphase-interpolated signal in dBTP.
    """
    return sample_peak_dbfs(signal.resample_poly(x, 4, 1, axis=0))


# --------------------------------------------------------------------------
# Marsh sounds
# --------------------------------------------------------------------------


def wind_rumble(rng: np.random.Generator, n: int, fs: int, channels: int) -> np.ndarray:
    """Wind buffeting the microphones: gusty noise, mostly below 40 Hz.

    Each channel mixes a shared gust with its own turbulence, as two capsules a
    few centimetres apart would pick up. A 10 Hz high-pass stands for the
    microphones' own low-frequency roll-off.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the noise.
    n : int
        Number of frames.
    fs : int
        Sample rate in Hz.
    channels : int
        Number of output channels.

    Returns
    -------
    numpy.ndarray
        Rumble of shape ``(n, channels)`` at roughly unit RMS.
    """
    shared = filtered_noise(rng, (n, 1), fs, (10.0, 40.0), order=3)
    own = filtered_noise(rng, (n, channels), fs, (10.0, 40.0), order=3)
    gust = slow_envelope(rng, n, fs, rate_hz=1.5, depth=0.6)[:, None]
    return gust * (0.7 * shared + 0.5 * own)


def generator_hum(
    rng: np.random.Generator, n: int, fs: int, harmonics: int = 10
) -> np.ndarray:
    """Hum of a small petrol generator: 50 Hz and its harmonics.

    The generator's speed wanders by a few hundredths of a hertz, and odd
    harmonics are stronger than even ones, as with a rectifier load.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the phases and the speed drift.
    n : int
        Number of frames.
    fs : int
        Sample rate in Hz.
    harmonics : int, optional
        Number of harmonics including the fundamental (50, 100, ... Hz).

    Returns
    -------
    numpy.ndarray
        Mono hum of shape ``(n,)`` with unit fundamental amplitude.
    """
    frequency = MAINS_HZ * slow_envelope(rng, n, fs, rate_hz=0.8, depth=0.0015)
    phase = 2.0 * np.pi * np.cumsum(frequency) / fs
    hum = np.zeros(n)
    for k in range(1, harmonics + 1):
        level = (1.6 if k % 2 else 1.0) / k
        hum += level * np.sin(k * phase + rng.uniform(0.0, 2.0 * np.pi))
    return hum / 1.6


def water_and_reeds(
    rng: np.random.Generator, n: int, fs: int, channels: int
) -> np.ndarray:
    """Broadband wash: water lapping at the creek edge and reeds rustling.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the noise.
    n : int
        Number of frames.
    fs : int
        Sample rate in Hz.
    channels : int
        Number of output channels.

    Returns
    -------
    numpy.ndarray
        Wash of shape ``(n, channels)`` at roughly unit RMS.
    """
    water = filtered_noise(rng, (n, channels), fs, (120.0, 2500.0), order=2)
    lapping = slow_envelope(rng, n, fs, rate_hz=2.5, depth=0.7)[:, None]
    reeds = filtered_noise(rng, (n, channels), fs, (2000.0, 11000.0), order=2)
    rustle = slow_envelope(rng, n, fs, rate_hz=6.0, depth=0.5)[:, None]
    return 0.8 * lapping * water + 0.45 * rustle * reeds


def bird_chirps(
    rng: np.random.Generator, n: int, fs: int, calls: int = 4
) -> np.ndarray:
    """A few short whistled calls, each a quick trill of rising-falling notes.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the call times, pitches and positions.
    n : int
        Number of frames.
    fs : int
        Sample rate in Hz.
    calls : int, optional
        Number of calls spread over the recording.

    Returns
    -------
    numpy.ndarray
        Stereo chirps of shape ``(n, 2)``, note peaks near 1.
    """
    out = np.zeros((n, 2))
    starts = np.sort(rng.uniform(0.1, n / fs - 0.6, calls))
    for start in starts:
        base = rng.uniform(3000.0, 4500.0)
        position = rng.uniform(-0.8, 0.8)
        level = rng.uniform(0.5, 1.0)
        for note in range(int(rng.integers(2, 5))):
            length = rng.uniform(0.05, 0.09)
            t = np.arange(int(length * fs)) / fs
            sweep = base * (1.0 + 0.45 * np.sin(np.pi * t / length))
            phase = 2.0 * np.pi * np.cumsum(sweep) / fs
            tone = np.sin(phase) + 0.2 * np.sin(2.0 * phase)
            note_sig = level * np.sin(np.pi * t / length) ** 2 * tone
            first = int((start + note * 0.11) * fs)
            out[first : first + t.size] += pan(note_sig, position)
    return out


# --------------------------------------------------------------------------
# Speech-like sounds
# --------------------------------------------------------------------------


def glottal_source(
    rng: np.random.Generator, f0: np.ndarray, fs: int, voice: Voice
) -> np.ndarray:
    """Glottal flow derivative of a Rosenberg pulse train, plus aspiration.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the aspiration noise.
    f0 : numpy.ndarray
        Fundamental frequency in Hz for every frame.
    fs : int
        Sample rate in Hz.
    voice : Voice
        Talker; its ``breathiness`` sets the aspiration level.

    Returns
    -------
    numpy.ndarray
        Source signal of the same length as ``f0``.
    """
    cycle = np.mod(np.cumsum(f0) / fs, 1.0)
    opening, closing = 0.4, 0.16
    flow_rate = np.zeros_like(cycle)
    rising = cycle < opening
    falling = (cycle >= opening) & (cycle < opening + closing)
    flow_rate[rising] = np.sin(np.pi * cycle[rising] / opening) / opening
    flow_rate[falling] = -np.sin(0.5 * np.pi * (cycle[falling] - opening) / closing) / closing
    flow_rate /= np.max(np.abs(flow_rate))
    aspiration = filtered_noise(rng, cycle.shape, fs, (1500.0, None), order=2)
    return flow_rate + voice.breathiness * (rising | falling) * aspiration


def formant_filter(x: np.ndarray, vowel: str, voice: Voice, fs: int) -> np.ndarray:
    """Pass a source through a cascade of two-pole formant resonators.

    Each resonator has unity gain at 0 Hz, as in a cascade formant synthesiser.

    Parameters
    ----------
    x : numpy.ndarray
        Source segment.
    vowel : str
        Key of ``VOWELS``.
    voice : Voice
        Talker; its ``formant_scale`` shifts the formants.
    fs : int
        Sample rate in Hz.

    Returns
    -------
    numpy.ndarray
        Filtered segment of the same length.
    """
    freqs, widths = VOWELS[vowel]
    y = x
    for freq, width in zip(freqs, widths):
        radius = np.exp(-np.pi * width / fs)
        theta = 2.0 * np.pi * freq * voice.formant_scale / fs
        a = np.array([1.0, -2.0 * radius * np.cos(theta), radius**2])
        y = signal.lfilter([np.sum(a)], a, y)
    return y


def syllable_plan(
    rng: np.random.Generator, start: float, end: float
) -> list[tuple[float, float, bool]]:
    """Lay out syllables over a talk span, with short pauses between phrases.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the syllable lengths and phrase breaks.
    start, end : float
        Talk span in seconds.

    Returns
    -------
    list of tuple of (float, float, bool)
        ``(onset, duration, phrase_final)`` for each syllable.
    """
    plan = []
    t = start
    left_in_phrase = int(rng.integers(4, 7))
    while True:
        duration = rng.uniform(0.14, 0.26)
        if t + duration > end:
            break
        left_in_phrase -= 1
        final = left_in_phrase == 0
        plan.append((t, duration, final))
        t += duration
        if final:
            t += rng.uniform(0.22, 0.36)
            left_in_phrase = int(rng.integers(4, 7))
    if plan:
        onset, duration, _ = plan[-1]
        plan[-1] = (onset, duration, True)
    return plan


def pitch_contour(
    rng: np.random.Generator,
    n: int,
    fs: int,
    plan: list[tuple[float, float, bool]],
    voice: Voice,
) -> np.ndarray:
    """Fundamental frequency over time: accents, phrase declination and a fall at phrase ends.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the accents and the small wander.
    n : int
        Number of frames.
    fs : int
        Sample rate in Hz.
    plan : list of tuple of (float, float, bool)
        Syllables from ``syllable_plan``.
    voice : Voice
        Talker; ``pitch_hz`` is the centre of the contour.

    Returns
    -------
    numpy.ndarray
        f0 in Hz for every frame.
    """
    times, values = [0.0], [voice.pitch_hz]
    step = 0
    for onset, duration, final in plan:
        declination = 1.12 - 0.05 * step
        accent = rng.choice([1.0, 1.0, 1.15, 0.95])
        times.append(onset + 0.5 * duration)
        values.append(voice.pitch_hz * declination * accent * (0.85 if final else 1.0))
        step = 0 if final else step + 1
    times.append(n / fs)
    values.append(voice.pitch_hz * 0.9)
    t = np.arange(n) / fs
    wander = slow_envelope(rng, n, fs, rate_hz=7.0, depth=0.01)
    return np.interp(t, times, values) * wander


def speech(
    rng: np.random.Generator, n: int, fs: int, voice: Voice, span: tuple[float, float]
) -> np.ndarray:
    """Speech-like talk: syllables of voiced vowels, some with a fricative onset.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of every random choice.
    n : int
        Number of frames.
    fs : int
        Sample rate in Hz.
    voice : Voice
        Talker.
    span : tuple of (float, float)
        Start and end of the talk in seconds; the rest is silent.

    Returns
    -------
    numpy.ndarray
        Mono talk of shape ``(n,)``.
    """
    plan = syllable_plan(rng, *span)
    source = glottal_source(rng, pitch_contour(rng, n, fs, plan, voice), fs, voice)
    hiss = filtered_noise(rng, (n,), fs, (3500.0, 9000.0), order=3)
    out = np.zeros(n)
    tail = int(0.04 * fs)
    vowels = list(VOWELS)
    for onset, duration, final in plan:
        # Each syllable's envelope runs on into the next one, so the level dips
        # between syllables of a phrase instead of falling silent.
        first = int(onset * fs)
        length = min(int(1.3 * duration * fs), n - first)
        u = np.arange(length) / length
        # Quick rise, held middle, slower decay: a syllable-rate envelope.
        envelope = np.minimum(1.0, u / 0.15) * np.minimum(1.0, (1.0 - u) / 0.4) ** 1.5
        level = rng.uniform(0.6, 1.0) * (0.7 if final else 1.0)
        segment = np.zeros(length + tail)
        segment[:length] = level * envelope * source[first : first + length]
        vowel = vowels[int(rng.integers(len(vowels)))]
        voiced = formant_filter(segment, vowel, voice, fs)
        stop = min(n, first + length + tail)
        out[first:stop] += voiced[: stop - first]
        if rng.random() < 0.35:
            burst = int(0.06 * fs)
            shape = np.sin(np.pi * np.arange(burst) / burst) ** 2
            start = max(0, first - burst // 2)
            out[start : start + burst] += 0.25 * shape * hiss[start : start + burst]
    return out


def room_tone(rng: np.random.Generator, n: int, fs: int) -> np.ndarray:
    """Boathouse room tone: soft air noise with water slapping under the floor.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the noise.
    n : int
        Number of frames.
    fs : int
        Sample rate in Hz.

    Returns
    -------
    numpy.ndarray
        Mono room tone of shape ``(n,)`` at roughly unit RMS.
    """
    air = filtered_noise(rng, (n,), fs, (60.0, 6000.0), order=1)
    slap = filtered_noise(rng, (n,), fs, (80.0, 400.0), order=2)
    under_floor = slow_envelope(rng, n, fs, rate_hz=3.0, depth=0.8)
    return 0.8 * air + 0.6 * under_floor * slap


def footsteps(rng: np.random.Generator, n: int, fs: int, times: list[float]) -> np.ndarray:
    """Footfalls on wooden boards: a low board resonance and a short knock.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the resonance pitch and the knock noise.
    n : int
        Number of frames.
    fs : int
        Sample rate in Hz.
    times : list of float
        Footfall times in seconds.

    Returns
    -------
    numpy.ndarray
        Mono footsteps of shape ``(n,)``, thump peaks near 1.
    """
    out = np.zeros(n)
    length = int(0.35 * fs)
    t = np.arange(length) / fs
    knock_noise = filtered_noise(rng, (length,), fs, (200.0, 1500.0), order=2)
    for when in times:
        board_hz = rng.uniform(28.0, 45.0)
        attack = 1.0 - np.exp(-t / 0.004)
        thump = attack * np.exp(-t / 0.07) * np.sin(2.0 * np.pi * board_hz * t)
        knock = 0.15 * np.exp(-t / 0.008) * knock_noise
        first = int(when * fs)
        stop = min(n, first + length)
        out[first:stop] += rng.uniform(0.7, 1.0) * (thump + knock)[: stop - first]
    return out


# --------------------------------------------------------------------------
# The files
# --------------------------------------------------------------------------


def dawn_ambience(fs: int = 48000, seconds: float = 3.0) -> np.ndarray:
    """Stereo dawn ambience on the marsh.

    Parameters
    ----------
    fs : int, optional
        Sample rate in Hz.
    seconds : float, optional
        Duration.

    Returns
    -------
    numpy.ndarray
        Stereo signal of shape ``(n, 2)``, not yet scaled.
    """
    rng = rng_for("dawn_ambience")
    n = int(seconds * fs)
    hum = pan(generator_hum(rng, n, fs), -0.5)
    return (
        1.0 * wind_rumble(rng, n, fs, 2)
        + 0.06 * hum
        + 0.12 * water_and_reeds(rng, n, fs, 2)
        + 0.25 * bird_chirps(rng, n, fs)
    )


def slipway_generator(fs: int = 44100, seconds: float = 3.0) -> np.ndarray:
    """Mono recording beside the generator on the slipway.

    Parameters
    ----------
    fs : int, optional
        Sample rate in Hz.
    seconds : float, optional
        Duration.

    Returns
    -------
    numpy.ndarray
        Mono signal of shape ``(n,)``, not yet scaled.
    """
    rng = rng_for("slipway_generator")
    n = int(seconds * fs)
    return (
        1.0 * generator_hum(rng, n, fs, harmonics=14)
        + 0.35 * wind_rumble(rng, n, fs, 1)[:, 0]
        + 0.08 * water_and_reeds(rng, n, fs, 1)[:, 0]
    )


# Interview timing in seconds: the host asks, then the guest answers.
INTERVIEW_SECONDS = 3.2
HOST_SPAN = (0.15, 1.45)
GUEST_SPAN = (1.7, 3.05)
GUEST_FOOTSTEPS = [0.25, 0.75, 1.2]


def host_stem(fs: int = 48000) -> np.ndarray:
    """Host microphone: the question, then room tone.

    Parameters
    ----------
    fs : int, optional
        Sample rate in Hz.

    Returns
    -------
    numpy.ndarray
        Mono signal of shape ``(n,)``, not yet scaled.
    """
    rng = rng_for("host_stem")
    n = int(INTERVIEW_SECONDS * fs)
    talk = speech(rng, n, fs, HOST, HOST_SPAN)
    return talk / np.max(np.abs(talk)) + 0.002 * room_tone(rng, n, fs)


def guest_stem(fs: int = 48000) -> np.ndarray:
    """Guest microphone: footsteps on the boards, the answer, a little hum.

    Parameters
    ----------
    fs : int, optional
        Sample rate in Hz.

    Returns
    -------
    numpy.ndarray
        Mono signal of shape ``(n,)``, not yet scaled.
    """
    rng = rng_for("guest_stem")
    n = int(INTERVIEW_SECONDS * fs)
    talk = speech(rng, n, fs, GUEST, GUEST_SPAN)
    return (
        talk / np.max(np.abs(talk))
        + 0.45 * footsteps(rng, n, fs, GUEST_FOOTSTEPS)
        + 0.008 * generator_hum(rng, n, fs, harmonics=6)
        + 0.002 * room_tone(rng, n, fs)
    )


def interview_mix(host: np.ndarray, guest: np.ndarray) -> np.ndarray:
    """Stereo delivery mix of the two 48 kHz stems, resampled to 44.1 kHz.

    Parameters
    ----------
    host, guest : numpy.ndarray
        Mono stems at 48 kHz, as written.

    Returns
    -------
    numpy.ndarray
        Stereo signal of shape ``(n, 2)`` at 44.1 kHz, not yet scaled.
    """
    mix = pan(host, -0.3) + pan(guest, 0.3)
    return signal.resample_poly(mix, 147, 160, axis=0)


def write_audio(path: Path, x: np.ndarray, fs: int, subtype: str) -> None:
    """Write one file, creating its folder.

    Float WAV goes through ``scipy.io.wavfile`` (no timestamped PEAK chunk, so
    the bytes are reproducible); everything else through soundfile.

    Parameters
    ----------
    path : pathlib.Path
        Output path; the suffix chooses WAV or FLAC.
    x : numpy.ndarray
        Signal, frames first.
    fs : int
        Sample rate in Hz.
    subtype : str
        soundfile subtype, e.g. ``"PCM_16"``, ``"PCM_24"`` or ``"FLOAT"``.
    """
    path.parent.mkdir(parents=True, exist_ok=True)
    if subtype == "FLOAT" and path.suffix == ".wav":
        wavfile.write(path, fs, x.astype(np.float32))
    else:
        sf.write(path, x, fs, subtype=subtype)


def check_levels(name: str, x: np.ndarray) -> None:
    """Refuse a signal that is not finite or whose levels break the limits.

    Parameters
    ----------
    name : str
        File name, for the error message.
    x : numpy.ndarray
        Signal, frames first, as it will be written.

    Raises
    ------
    ValueError
        If ``x`` has a NaN or infinity, a sample peak outside
        ``PEAK_LIMITS_DBFS`` or a true peak at or above ``TRUE_PEAK_LIMIT_DBTP``.
    """
    if not np.all(np.isfinite(x)):
        raise ValueError(f"{name}: signal is not finite")
    low, high = PEAK_LIMITS_DBFS
    peak = sample_peak_dbfs(x)
    if not low <= peak <= high:
        raise ValueError(f"{name}: sample peak {peak:.2f} dBFS outside [{low}, {high}]")
    true_peak = true_peak_dbtp(x)
    if true_peak >= TRUE_PEAK_LIMIT_DBTP:
        raise ValueError(
            f"{name}: true peak {true_peak:.2f} dBTP not below {TRUE_PEAK_LIMIT_DBTP}"
        )


def finish(x: np.ndarray, fs: int, peak_dbfs: float) -> np.ndarray:
    """Fade the edges of a signal, then scale it to its target sample peak.

    Parameters
    ----------
    x : numpy.ndarray
        Signal, frames first.
    fs : int
        Sample rate in Hz.
    peak_dbfs : float
        Target sample peak in dBFS.

    Returns
    -------
    numpy.ndarray
        Signal ready to be written.
    """
    return scale_to_peak(fade_edges(x, fs), peak_dbfs)


def main() -> None:
    """Synthesise, check and write every demo file, then print a summary."""
    host = finish(host_stem(), 48000, -6.0)
    guest = finish(guest_stem(), 48000, -7.0)
    ambience = finish(dawn_ambience(), 48000, -9.0)
    generator = finish(slipway_generator(), 44100, -10.0)
    mix = finish(interview_mix(host, guest), 44100, -5.0)
    files = [
        ("marsh/dawn_ambience.wav", ambience, 48000, "PCM_24"),
        ("marsh/slipway_generator.flac", generator, 44100, "PCM_24"),
        ("boathouse/host_stem.wav", host, 48000, "PCM_24"),
        ("boathouse/guest_stem.wav", guest, 48000, "FLOAT"),
        ("boathouse/interview_mix.wav", mix, 44100, "PCM_16"),
    ]
    for name, x, _, _ in files:
        check_levels(name, x)
    print(f"{'file':30} {'format':>6} {'subtype':>7} {'rate':>6} {'ch':>2} {'s':>4} "
          f"{'peak dBFS':>9} {'TP dBTP':>7}")
    for name, x, fs, subtype in files:
        path = HERE / name
        write_audio(path, x, fs, subtype)
        info = sf.info(path)
        data, _ = sf.read(path, always_2d=True)
        print(f"{name:30} {info.format:>6} {info.subtype:>7} {info.samplerate:>6} "
              f"{info.channels:>2} {info.duration:4.2f} {sample_peak_dbfs(data):9.2f} "
              f"{true_peak_dbtp(data):7.2f}")


if __name__ == "__main__":
    main()
