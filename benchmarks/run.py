"""chainrun throughput and memory benchmarks, measured against two baselines in one run.

    python benchmarks/run.py                 # full run (makes ~2.5 GB of test files in benchmarks/work/)
    python benchmarks/run.py --smoke         # under a minute: tiny files, one round; checks the harness works

A  ``chainrun run`` with every meter on (true peak included), one worker (``--workers 1``: one
   core, every step in one thread, like B and C);
A2 the same with two workers, which for a single file means its pipeline threads (the default on
   a two-core machine);
B  the plain script: soundfile.read the whole file, scipy.signal.sosfilt with the same SOS,
   soundfile.write;
C  the I/O floor: read and write the same file in blocks with soundfile, no DSP.

Two more floors show what the targets leave room for, in the same run:

D  the filter floor: C plus scipy.signal.sosfilt with its state carried from block to block, and
   nothing else (no meters, no checks, no atomic write): the least any streaming tool built on
   sosfilt does;
I  the import floor: a process that only imports numpy, soundfile and scipy.signal (I0: numpy and
   soundfile only, what C imports), the start-up every run that designs and filters with
   scipy.signal pays before it reads a sample.

A, A2, B, C, D and I run interleaved, round after round, each in its own process, so that a noisy
neighbour slows all of them alike; the figures are medians. Peak RSS is the whole process's
(``ru_maxrss`` from ``os.wait4``), CPU time its user + system time. Every child runs with
OPENBLAS_NUM_THREADS=1 (CHILD_ENV): none uses BLAS threads for its work, and their idle spin at
start-up distorted the CPU figures (see CHILD_ENV). Each ratio is given twice:
for the whole process (start-up, imports, design and reports included) and per extra second of
audio (the same steps on a short file subtracted, which leaves the cost that grows with the
audio). Separately: peak RSS of A on a short vs a long file, 16 files with one vs two workers
(whole process, and the part that grows with the audio: the same minus 16 one-second files),
digital silence after loud content vs noise (denormals), and true-peak metering on vs off.

Start-up: ``chainrun run`` (default workers) on a 1-second file against C on it (also with both
meters off, which shows the design, guard and filter path alone), and ``chainrun check`` of the
benchmark recipe against I0, whole process; the 1-second file is also the short file
subtracted for the per-second figures (wall and CPU time). The meters alone: a child process times
one TruePeakMeter's ``update`` (and benchmarks/loudness_cost.py the loudness meter's) over 600 s of
stereo noise in blocks, with ``time.process_time`` and one BLAS thread, and gives the true-peak
meter's worst error against a 4x oversampling reference with a 1025-tap filter. The last section
is a "Targets" table (issue 17): each target, its figure, met or missed (marked as smoke figures
with ``--smoke``). ``--main-seconds`` shortens the main file when time is short.

Nothing here is asserted; the results are printed as a Markdown list (and written to ``--out``
if given) for benchmarks/RESULTS.md.

The measuring process imports nothing heavier than the standard library: a child's
``ru_maxrss`` counts the pages it shared with its parent before ``exec``, so a parent that had
imported scipy would inflate every child's peak RSS. Test files and the SOS are made by child
processes of this same script (``--make-noise``, ``--make-sos``).
"""
from __future__ import annotations

import argparse
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))
RATE = 48000

RECIPE = """\
format: 1
name: Benchmark chain (six biquads)
chain:
  - {type: highpass, freq: 40, order: 4}
  - {type: notch, freq: 50, q: 20}
  - {type: peak, freq: 250, gain_db: -3, q: 1.2}
  - {type: peak, freq: 3200, gain_db: 2, q: 1.0}
  - {type: high_shelf, freq: 9000, gain_db: 1.5, slope: 1}
guard:
  on_over: clip
output:
  subtype: same
"""

PLAIN_SCRIPT = """\
import sys, soundfile as sf, scipy.signal as s, numpy as np
sos = np.load(sys.argv[3])
x, fs = sf.read(sys.argv[1])
info = sf.info(sys.argv[1])
y = s.sosfilt(sos, x, axis=0)
sf.write(sys.argv[2], y, fs, subtype=info.subtype)
"""

FLOOR_SCRIPT = """\
import sys, soundfile as sf
info = sf.info(sys.argv[1])
with sf.SoundFile(sys.argv[1]) as fin, sf.SoundFile(sys.argv[2], "w", info.samplerate, info.channels,
                                                      info.subtype, format=info.format) as fout:
    for block in fin.blocks(65536, dtype="float64"):
        fout.write(block)
"""

FILTER_FLOOR_SCRIPT = """\
import sys, soundfile as sf, scipy.signal as s, numpy as np
sos = np.load(sys.argv[3])
zi = None
info = sf.info(sys.argv[1])
with sf.SoundFile(sys.argv[1]) as fin, sf.SoundFile(sys.argv[2], "w", info.samplerate, info.channels,
                                                      info.subtype, format=info.format) as fout:
    for block in fin.blocks(65536, dtype="float64"):
        if zi is None:
            zi = np.zeros((sos.shape[0], 2, block.shape[1]))
        y, zi = s.sosfilt(sos, block, axis=0, zi=zi)
        fout.write(y)
"""

IMPORTS = {"I": "import numpy, soundfile, scipy.signal", "I0": "import numpy, soundfile"}


def make_noise_file(path: str, seconds: float, channels: int = 2, subtype: str = "PCM_24",
                    silence_after: float | None = None, seed: int = 7) -> None:
    """Noise-like content (pinkish noise with a slow level envelope), written in blocks.

    With ``silence_after``, loud content up to that time and digital silence after it.
    """
    import numpy as np
    import soundfile as sf
    from scipy.signal import lfilter

    rng = np.random.default_rng(seed)
    frames = int(seconds * RATE)
    block = 1 << 16
    b, a = [0.3], [1.0, -0.95]               # one-pole low-pass: more energy low down, like real ambience
    zi = np.zeros((1, channels))
    with sf.SoundFile(path, "w", RATE, channels, subtype, format="WAV") as f:
        done = 0
        while done < frames:
            n = min(block, frames - done)
            white = rng.standard_normal((n, channels))
            low, zi = lfilter(b, a, white, axis=0, zi=zi)
            pink = low + 0.5 * white
            t = (done + np.arange(n)) / RATE
            env = 0.03 * (1.0 + 0.5 * np.sin(2 * np.pi * t / 7.0))[:, None]
            x = np.clip(pink * env * 4.0, -0.7, 0.7)
            if silence_after is not None:
                x[t >= silence_after] = 0.0
            f.write(x)
            done += n


def meter_cost(kind: str, seconds: float, repeats: int) -> None:
    """Print the in-process CPU cost of one meter: ms of CPU per second of stereo 48 kHz noise.

    ``kind`` is ``truepeak`` (one :class:`TruePeakMeter`, as each of the two a run keeps) or
    ``loudness`` (benchmarks/loudness_cost.py, run in this process).  The noise is made in blocks
    of 65536 frames as the reader hands them over, with their extremes; the meter's ``update`` is
    timed over all of it with ``time.process_time``, ``repeats`` times; the median is printed.
    For the true peak, the worst error against a long-filter 4x reference is printed too.
    """
    sys.path.insert(0, os.path.dirname(HERE))
    if kind == "loudness":
        sys.path.insert(0, HERE)
        import loudness_cost
        sys.argv = ["loudness_cost.py", "--seconds", f"{seconds:g}", "--repeats", str(repeats)]
        loudness_cost.main()
        return
    import numpy as np
    from chainrun.meters.truepeak import TruePeakMeter

    frames, block = int(seconds * RATE), 65536
    rng = np.random.default_rng(17)
    blocks = [0.1 * rng.standard_normal((2, min(block, frames - i))) for i in range(0, frames, block)]
    extremes = [(b.max(axis=1), b.min(axis=1)) for b in blocks]
    runs = []
    for _ in range(repeats):
        meter = TruePeakMeter(RATE, 2)
        t0 = time.process_time()
        for b, ex in zip(blocks, extremes):
            meter.update(b, ex)
        meter.reading()
        runs.append(time.process_time() - t0)
    per_s = [1000.0 * r / seconds for r in runs]
    print(f"truepeak {statistics.median(per_s):.4f} ms per second (runs: {', '.join(f'{v:.3f}' for v in per_s)})")
    print(f"truepeak-error {true_peak_error():.4f} dB")


def true_peak_error() -> float:
    """Worst |meter - reference| in dB over sines up to 0.45 x rate and noise below 0.45 x rate.

    The reference oversamples 4x with a 1025-tap Kaiser (beta 10) low-pass at the input's Nyquist
    frequency (scipy.signal.upfirdn), far longer than the meter's 4 x 38 taps.  Every signal fades
    in and out, so that neither has edges to ring at.
    """
    import numpy as np
    from scipy import signal
    from chainrun.meters.truepeak import TruePeakMeter

    h = signal.firwin(1025, 0.25, window=("kaiser", 10.0)) * 4
    rng = np.random.default_rng(5)
    n = RATE // 2
    t = np.arange(n) / RATE
    signals = [0.5 * np.sin(2 * np.pi * f * t + ph) for f in np.linspace(997.0, 0.45 * RATE, 24)
               for ph in (0.0, 0.7, 1.9)]
    band = signal.firwin(511, 0.9, window=("kaiser", 10.0))   # noise kept below 0.45 x rate, as the sines
    signals += [np.convolve(0.2 * rng.standard_normal(n), band, mode="same") for _ in range(8)]
    fade = np.ones(n)
    ramp = np.sin(np.linspace(0.0, np.pi / 2, 2400)) ** 2      # both start from and end in silence
    fade[:2400], fade[-2400:] = ramp, ramp[::-1]
    worst = 0.0
    for x in signals:
        x = x * fade
        meter = TruePeakMeter(RATE, 1)
        meter.update(x[np.newaxis, :])
        got = float(np.asarray(meter.reading().true_peak)[0])
        ref = float(np.max(np.abs(signal.upfirdn(h, x, up=4))))
        got_db, ref_db = 20 * np.log10(got), 20 * np.log10(ref)
        worst = max(worst, abs(got_db - ref_db))
    return worst


class Run:
    """One child process: wall seconds, CPU seconds (user + system), peak RSS in MB."""

    def __init__(self, wall: float, cpu: float, rss: float):
        self.wall, self.cpu, self.rss = wall, cpu, rss


# Every timed child starts without BLAS worker threads. numpy's OpenBLAS starts them on import and
# they spin for about 0.07 s of CPU before sleeping; a 0.1 s process (C on the 1-second file) exits
# during the spin and a longer one pays all of it, so the spin inflated C's per-second CPU time (by
# 0.05 to 0.1 ms per second of audio on 600 s, five times that on 120 s) and flattered A/C. No step
# here uses BLAS threads for its work (chainrun meters with one BLAS thread, threadpoolctl).
CHILD_ENV = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


def timed(cmd: list[str], env: dict | None = None) -> Run:
    """Run one child process to its end and measure it (its environment with CHILD_ENV)."""
    env = dict(os.environ if env is None else env, **CHILD_ENV)
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    err = proc.stderr.read().decode(errors="replace")
    proc.stderr.close()
    code = os.waitstatus_to_exitcode(status)
    if code not in (0, 1):
        raise SystemExit(f"benchmark step failed ({code}): {' '.join(cmd)}\n{err}")
    return Run(wall, usage.ru_utime + usage.ru_stime, usage.ru_maxrss / 1024.0)


def chainrun_cmd(recipe: str, inputs: list[str], out: str, *extra: str) -> list[str]:
    return [sys.executable, "-m", "chainrun", "run", recipe, *inputs, "-o", out, "--redo", *extra]


class Medians:
    """Medians over rounds of wall time, CPU time and peak RSS, per step."""

    def __init__(self, runs: dict[str, list[Run]]):
        self.runs = runs

    def wall(self, k: str) -> float:
        return statistics.median(r.wall for r in self.runs[k])

    def cpu(self, k: str) -> float:
        return statistics.median(r.cpu for r in self.runs[k])

    def rss(self, k: str) -> float:
        return statistics.median(r.rss for r in self.runs[k])


def median_rounds(steps: dict[str, list[str]], rounds: int) -> Medians:
    """Run every step once per round, interleaved."""
    runs: dict[str, list[Run]] = {k: [] for k in steps}
    for _ in range(rounds):
        for name, cmd in steps.items():
            runs[name].append(timed(cmd))
    return Medians(runs)


def cpu_times() -> tuple[float, float]:
    """(all CPU time, steal time) of the machine so far, in seconds (Linux /proc/stat; zeros elsewhere).

    Steal time is time a virtual machine's CPUs were ready to run but the host ran something else;
    a process's CPU time can include some of it, so a run with much of it reads slower.
    """
    try:
        with open("/proc/stat") as fh:
            fields = [int(v) for v in fh.readline().split()[1:]]
        hz = os.sysconf("SC_CLK_TCK")
        return sum(fields[:8]) / hz, (fields[7] if len(fields) > 7 else 0) / hz
    except (OSError, ValueError, IndexError):
        return 0.0, 0.0


def machine() -> str:
    cpu = platform.processor() or platform.machine()
    try:
        with open("/proc/cpuinfo") as fh:
            names = [ln.split(":", 1)[1].strip() for ln in fh if ln.startswith("model name")]
        if names:
            cpu = f"{names[0]} x{len(names)}"
    except OSError:
        pass
    versions = subprocess.run(
        [sys.executable, "-c", "import numpy, scipy, soundfile as sf; print(f'numpy {numpy.__version__}, "
         "scipy {scipy.__version__}, soundfile {sf.__version__} (libsndfile {sf.__libsndfile_version__})')"],
        capture_output=True, text=True).stdout.strip()
    return f"{cpu}; {platform.system()} {platform.release()}; Python {platform.python_version()}, {versions}"


def _child(*args: str) -> None:
    subprocess.run([sys.executable, os.path.abspath(__file__), *args], check=True)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--smoke", action="store_true", help="tiny files, one round: checks the harness runs")
    ap.add_argument("--rounds", type=int, default=None, help="rounds of the interleaved A/B/C comparison")
    ap.add_argument("--work", default=os.path.join(HERE, "work"), help="folder for generated files")
    ap.add_argument("--out", help="also write the Markdown results to this file")
    ap.add_argument("--make-noise", nargs=2, metavar=("PATH", "SECONDS"), help=argparse.SUPPRESS)
    ap.add_argument("--silence-after", type=float, help=argparse.SUPPRESS)
    ap.add_argument("--seed", type=int, default=7, help=argparse.SUPPRESS)
    ap.add_argument("--main-seconds", type=float, default=None,
                    help="length of the main file (default 600; 5 with --smoke)")
    ap.add_argument("--make-sos", nargs=2, metavar=("RECIPE", "NPY"), help=argparse.SUPPRESS)
    ap.add_argument("--meter-cost", nargs=3, metavar=("KIND", "SECONDS", "REPEATS"), help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.meter_cost:
        meter_cost(args.meter_cost[0], float(args.meter_cost[1]), int(args.meter_cost[2]))
        return 0
    if args.make_noise:
        make_noise_file(args.make_noise[0], float(args.make_noise[1]), silence_after=args.silence_after,
                        seed=args.seed)
        return 0
    if args.make_sos:
        import numpy as np
        sys.path.insert(0, os.path.dirname(HERE))
        from chainrun import design, load
        np.save(args.make_sos[1], design(load(args.make_sos[0]), RATE).sos)
        return 0

    smoke = args.smoke
    rounds = args.rounds or (1 if smoke else 5)
    main_s = args.main_seconds or (5.0 if smoke else 600.0)     # the 10-minute file
    short_s = 1.0                              # the 1-second file: start-up, and subtracted per second
    minute_s, long_s = (2.0, 6.0) if smoke else (60.0, 3600.0)   # peak RSS, short vs long
    meter_s, meter_repeats = (10.0, 1) if smoke else (600.0, 3)
    many_s, many_n = (1.0, 4) if smoke else (60.0, 16)
    few_s = 0.2 if smoke else 1.0              # the small batch whose time is subtracted
    work = args.work
    os.makedirs(work, exist_ok=True)
    scratch = tempfile.mkdtemp(prefix="out-", dir=work)

    recipe = os.path.join(work, "bench-recipe.yaml")
    with open(recipe, "w") as fh:
        fh.write(RECIPE)
    sos_path = os.path.join(work, "bench-sos.npy")
    _child("--make-sos", recipe, sos_path)
    plain = os.path.join(work, "plain.py")
    floor = os.path.join(work, "floor.py")
    filter_floor = os.path.join(work, "filter-floor.py")
    for path, text in ((plain, PLAIN_SCRIPT), (floor, FLOOR_SCRIPT), (filter_floor, FILTER_FLOOR_SCRIPT)):
        with open(path, "w") as fh:
            fh.write(text)
    imports = {k: [sys.executable, "-c", v] for k, v in IMPORTS.items()}

    def need(name: str, seconds: float, silence_after: float | None = None, seed: int = 7) -> str:
        path = os.path.join(work, name)
        data_bytes = int(seconds * RATE) * 2 * 3          # stereo PCM_24
        if not os.path.exists(path) or not 0 <= os.path.getsize(path) - data_bytes <= 4096:
            print(f"making {name} ({seconds:g} s)...", file=sys.stderr)
            extra = ["--seed", str(seed)] + (["--silence-after", str(silence_after)] if silence_after else [])
            _child("--make-noise", path, str(seconds), *extra)
        return path

    main_file = need(f"noise-{main_s:g}s.wav", main_s)
    command = (f"python benchmarks/run.py{' --smoke' if smoke else ''} --rounds {rounds}"
               + (f" --main-seconds {main_s:g}" if args.main_seconds else ""))
    lines = [f"Machine: {machine()}", "", f"Command: `{command}`", ""]
    # chainrun as installed: `pip install .` byte-compiles the package, and a checkout writes its
    # bytecode on the first run; with PYTHONDONTWRITEBYTECODE set (as on some build machines) a
    # checkout would instead compile every module on every start (about 35 ms here).
    import compileall
    compileall.compile_dir(os.path.join(os.path.dirname(HERE), "chainrun"), quiet=1)
    lines += ["chainrun's modules were byte-compiled first, as an installed package is.", ""]

    def out(name: str) -> str:
        return os.path.join(scratch, name)

    short = need(f"noise-{short_s:g}s.wav", short_s)
    print("A/A2/B/C/D/I interleaved...", file=sys.stderr)
    names = {"A": "A chainrun, one worker (all meters, one core)",
             "A2": "A2 chainrun, two workers (all meters, the file's pipeline threads)",
             "B": "B plain script (read all, sosfilt, write)",
             "C": "C I/O floor (blocks, no DSP)",
             "D": "D filter floor (C plus sosfilt, nothing else)",
             "I": "I import floor (numpy, soundfile, scipy.signal; no audio)",
             "I0": "I0 numpy and soundfile only (no audio)"}
    before = cpu_times()
    m = median_rounds({
        "A": chainrun_cmd(recipe, [main_file], out("a"), "--workers", "1"),
        "A2": chainrun_cmd(recipe, [main_file], out("a2"), "--workers", "2"),
        "B": [sys.executable, plain, main_file, out("b.wav"), sos_path],
        "C": [sys.executable, floor, main_file, out("c.wav")],
        "D": [sys.executable, filter_floor, main_file, out("d.wav"), sos_path],
        **imports,
        "A short": chainrun_cmd(recipe, [short], out("a-short"), "--workers", "1"),
        "S short": chainrun_cmd(recipe, [short], out("s-short")),
        "S bare short": chainrun_cmd(recipe, [short], out("s-bare-short"), "--no-true-peak", "--no-loudness"),
        "check": [sys.executable, "-m", "chainrun", "check", recipe],
        "A2 short": chainrun_cmd(recipe, [short], out("a2-short"), "--workers", "2"),
        "C short": [sys.executable, floor, short, out("c-short.wav")],
        "D short": [sys.executable, filter_floor, short, out("d-short.wav"), sos_path],
    }, rounds)
    after = cpu_times()
    total, steal = after[0] - before[0], after[1] - before[1]
    lines += [f"Steal time during these rounds (the host running something else while this machine's CPUs were "
              f"ready): {steal:.2f} s of {total:.1f} s of CPU time ({100 * steal / total if total else 0:.1f} %).", ""]
    lines += [f"## Stereo 48 kHz PCM_24, {main_s:g} s of noise-like content, six biquads; medians of {rounds} rounds",
              "", "| step | median time | CPU time | times real time | peak RSS |", "| --- | ---: | ---: | ---: | ---: |"]
    for k in ("A", "A2", "B", "C", "D", "I", "I0"):
        lines.append(f"| {names[k]} | {m.wall(k):.2f} s | {m.cpu(k):.2f} s | {main_s / m.wall(k):.0f}x | "
                     f"{m.rss(k):.0f} MB |")

    def per_second(k: str, of=None) -> float:
        """(step - step on the short file) / (C - C on the short file): the ratio that grows with the audio."""
        of = of or m.wall
        dc = of("C") - of("C short")
        return (of(k) - of(f"{k} short")) / dc if dc > 0 else float("nan")

    lines += ["", f"- A/B = {m.wall('A') / m.wall('B'):.2f} (target <= 0.8); A2/B = {m.wall('A2') / m.wall('B'):.2f}",
              f"- A/C = {m.wall('A') / m.wall('C'):.2f} whole process (target <= 1.3); "
              f"A2/C = {m.wall('A2') / m.wall('C'):.2f}",
              f"- per extra second of audio: A/C = {per_second('A'):.2f}, A2/C = {per_second('A2'):.2f} "
              f"(CPU time: A/C = {per_second('A', m.cpu):.2f}, A2/C = {per_second('A2', m.cpu):.2f}) "
              f"((step - step on the {short_s:g} s file) / (C - C on the {short_s:g} s file); short-file medians: "
              f"A {m.wall('A short'):.2f} s, A2 {m.wall('A2 short'):.2f} s, C {m.wall('C short'):.2f} s)",
              f"- peak RSS of A = {m.rss('A'):.0f} MB, of A2 = {m.rss('A2'):.0f} MB (target <= 150 MB)",
              f"- the floors: D/C = {m.wall('D') / m.wall('C'):.2f} whole process, {per_second('D'):.2f} per extra "
              f"second of audio (D short {m.wall('D short'):.2f} s); the {main_s - short_s:g} s of audio between the two "
              f"files cost A {m.wall('A') - m.wall('A short'):.2f} s and D {m.wall('D') - m.wall('D short'):.2f} s; "
              f"importing scipy.signal costs "
              f"{m.wall('I') - m.wall('I0'):.2f} s and {m.rss('I') - m.rss('I0'):.0f} MB over numpy and soundfile "
              f"(I - I0), which is {(m.wall('I') - m.wall('I0')) / m.wall('C'):.2f} of C",
              f"- start-up: `chainrun run` (default workers) on the {short_s:g} s file {m.wall('S short'):.2f} s vs the "
              f"I/O floor C on it {m.wall('C short'):.2f} s: {m.wall('S short') / m.wall('C short'):.2f}; "
              f"`chainrun check` of the benchmark recipe {m.wall('check'):.2f} s vs I0 {m.wall('I0'):.2f} s: "
              f"{m.wall('check') / m.wall('I0'):.2f}; `chainrun run` with both meters off (`--no-true-peak "
              f"--no-loudness`: design, guard, filter and reports only) {m.wall('S bare short'):.2f} s: "
              f"{m.wall('S bare short') / m.wall('C short'):.2f} of C", ""]

    print("true peak on/off...", file=sys.stderr)
    tp = median_rounds({
        "on": chainrun_cmd(recipe, [main_file], out("tp-on"), "--workers", "1"),
        "off": chainrun_cmd(recipe, [main_file], out("tp-off"), "--workers", "1", "--no-true-peak"),
    }, rounds)
    lines += [f"- true-peak metering adds {100 * (tp.wall('on') / tp.wall('off') - 1):+.0f} % to A "
              f"({tp.wall('on'):.2f} s vs {tp.wall('off'):.2f} s; target <= +25 %)"]

    print("silence vs noise...", file=sys.stderr)
    silent = need(f"loud-then-silence-{main_s:g}s.wav", main_s, silence_after=main_s * 0.05)
    dn = median_rounds({
        "noise": chainrun_cmd(recipe, [main_file], out("dn-noise"), "--workers", "1"),
        "silence": chainrun_cmd(recipe, [silent], out("dn-silence"), "--workers", "1"),
    }, rounds)
    lines += [f"- digital silence after loud content vs noise: {dn.wall('silence') / dn.wall('noise'):.2f} "
              f"({dn.wall('silence'):.2f} s vs {dn.wall('noise'):.2f} s; target <= 1.2)"]

    print("short vs long file RSS...", file=sys.stderr)
    long_ = need(f"noise-{long_s:g}s.wav", long_s)
    minute = need(f"noise-{minute_s:g}s.wav", minute_s)
    r_short = timed(chainrun_cmd(recipe, [minute], out("short"), "--workers", "1"))
    r_long = timed(chainrun_cmd(recipe, [long_], out("long"), "--workers", "1"))
    r_long2 = timed(chainrun_cmd(recipe, [long_], out("long2"), "--workers", "2"))
    shutil.rmtree(out("long"), ignore_errors=True)
    shutil.rmtree(out("long2"), ignore_errors=True)
    lines += [f"- peak RSS, {minute_s:g} s file {r_short.rss:.0f} MB vs {long_s:g} s file {r_long.rss:.0f} MB: "
              f"ratio {r_long.rss / r_short.rss:.2f} (target <= 1.15; the long file ran at {long_s / r_long.wall:.0f}x "
              f"real time with one worker; with two workers {long_s / r_long2.wall:.0f}x and {r_long2.rss:.0f} MB)"]

    print("one vs two workers...", file=sys.stderr)
    batches = {}
    for label, seconds in (("long", many_s), ("short", few_s)):
        folder = os.path.join(work, f"many-{many_n}x{seconds:g}s")
        os.makedirs(folder, exist_ok=True)
        for i in range(many_n):
            need(os.path.join(folder, f"take-{i:02d}.wav"), seconds, seed=100 + i)
        batches[label] = folder
    wk = median_rounds({
        "1": chainrun_cmd(recipe, [batches["long"]], out("w1"), "--workers", "1"),
        "2": chainrun_cmd(recipe, [batches["long"]], out("w2"), "--workers", "2"),
        "1 short": chainrun_cmd(recipe, [batches["short"]], out("w1s"), "--workers", "1"),
        "2 short": chainrun_cmd(recipe, [batches["short"]], out("w2s"), "--workers", "2"),
        **imports,
    }, rounds)
    grow1, grow2 = wk.wall("1") - wk.wall("1 short"), wk.wall("2") - wk.wall("2 short")
    # If every start-up cost but the imports took no time and two workers halved the rest exactly:
    best = (wk.wall("I") + grow1) / (wk.wall("I") + grow1 / 2) if grow1 > 0 else float("nan")
    lines += [f"- {many_n} files of {many_s:g} s, two workers vs one: whole process {wk.wall('1'):.2f} s vs "
              f"{wk.wall('2'):.2f} s, speed-up {wk.wall('1') / wk.wall('2'):.2f}x; the part that grows with the "
              f"audio (the same minus {many_n} files of {few_s:g} s: {wk.wall('1 short'):.2f} s and "
              f"{wk.wall('2 short'):.2f} s) {grow1:.2f} s vs {grow2:.2f} s, speed-up "
              f"{grow1 / grow2 if grow2 > 0 else float('nan'):.2f}x (target >= 1.8x on two cores; this machine has "
              f"{os.cpu_count()} cores; CPU time one worker {wk.cpu('1'):.2f} s, two workers {wk.cpu('2'):.2f} s)",
              f"- the whole-process speed-up two workers could reach if start-up were only the import floor I "
              f"({wk.wall('I'):.2f} s in this group) and the growing part halved exactly: {best:.2f}x", ""]

    print("meters alone, in-process CPU...", file=sys.stderr)
    one_core = dict(os.environ, **CHILD_ENV)
    costs = {}
    for kind in ("truepeak", "loudness"):
        proc = subprocess.run([sys.executable, os.path.abspath(__file__), "--meter-cost", kind, f"{meter_s:g}",
                               str(meter_repeats)], capture_output=True, text=True, env=one_core, check=True)
        costs[kind] = proc.stdout
        lines.append(f"- {kind} meter alone, {meter_s:g} s of stereo 48 kHz noise in blocks of 65536, "
                     f"one BLAS thread: " + "; ".join(ln.strip() for ln in proc.stdout.splitlines()))
    tp_ms = float(costs["truepeak"].split()[1])
    tp_err = float(costs["truepeak"].split("truepeak-error")[1].split()[0])
    loud_ms = float(costs["loudness"].split("median")[1].split()[0])
    lines.append("")

    peak_rss = max(m.rss("A"), m.rss("A2"), r_short.rss, r_long.rss, r_long2.rss)
    grow_speedup = grow1 / grow2 if grow2 > 0 else float("nan")
    rows = [
        (f"start-up: `chainrun run` on a {short_s:g} s file / I/O floor C on it <= 2.5",
         f"{m.wall('S short') / m.wall('C short'):.2f} ({m.wall('S short'):.2f} s vs {m.wall('C short'):.2f} s)",
         m.wall("S short") / m.wall("C short") <= 2.5),
        ("start-up: `chainrun check` of the recipe / I0 <= 2.5",
         f"{m.wall('check') / m.wall('I0'):.2f} ({m.wall('check'):.2f} s vs {m.wall('I0'):.2f} s)",
         m.wall("check") / m.wall("I0") <= 2.5),
        (f"per second of audio ({main_s:g} s minus {short_s:g} s file), CPU time, A/C <= 1.5 on one core",
         f"{per_second('A', m.cpu):.2f} (wall time {per_second('A'):.2f})", per_second("A", m.cpu) <= 1.5),
        ("A/B <= 0.8", f"{m.wall('A') / m.wall('B'):.2f} (A2/B {m.wall('A2') / m.wall('B'):.2f})",
         m.wall("A") / m.wall("B") <= 0.8),
        ("peak RSS <= 150 MB at any length", f"{peak_rss:.0f} MB (largest of A, A2, the {minute_s:g} s and "
         f"{long_s:g} s files with one and two workers)", peak_rss <= 150),
        (f"{long_s:g} s / {minute_s:g} s file peak RSS <= 1.15", f"{r_long.rss / r_short.rss:.2f}",
         r_long.rss / r_short.rss <= 1.15),
        (f"two workers >= 1.8x one on the part of a {many_n}-file batch that grows with the audio",
         f"{grow_speedup:.2f}x (whole process {wk.wall('1') / wk.wall('2'):.2f}x)", grow_speedup >= 1.8),
        ("each true-peak meter <= 0.35 ms CPU per second of stereo 48 kHz audio",
         f"{tp_ms:.3f} ms (worst error against the 4x long-filter reference {tp_err:.4f} dB)", tp_ms <= 0.35),
        ("loudness meter <= 0.3 ms CPU per second of stereo 48 kHz audio", f"{loud_ms:.3f} ms", loud_ms <= 0.3),
        ("digital silence after loud content / noise <= 1.2 (earlier target)",
         f"{dn.wall('silence') / dn.wall('noise'):.2f}", dn.wall("silence") / dn.wall("noise") <= 1.2),
    ]
    smoke_note = " (SMOKE: tiny files, one round; these figures say nothing about speed)" if smoke else ""
    lines += [f"## Targets{smoke_note}", "", "| target | figure | met? |", "| --- | --- | --- |"]
    lines += [f"| {t} | {f} | {'met' if ok else 'missed'}{' (smoke)' if smoke else ''} |" for t, f, ok in rows]
    lines.append("")

    shutil.rmtree(scratch, ignore_errors=True)
    text = "\n".join(lines)
    print(text)
    if args.out:
        with open(args.out, "w") as fh:
            fh.write(text + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
