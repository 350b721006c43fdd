"""Batch contract of `chainrun run`: mirrored tree, skips, refusals, untouched inputs, reports, exit codes,
workers, per-rate rejection, and faults inside a batch.

Expected values: the W3C Audio EQ Cookbook (coefficients in the report),
scipy.signal.sosfilt over the whole file, files read back with soundfile,
analytic facts, and the contract in README.md.
"""
from __future__ import annotations

import csv
import dataclasses
import errno
import hashlib
import math
import os

import numpy as np
import pytest
import soundfile as sf
from scipy import signal

import chainrun.results
from chainrun import design, load
from chainrun.batch import executors
from chainrun.batch.discover import Job
from chainrun.batch import run as batch_run
from support import by_rel, report_of, temporaries

HEX64 = set("0123456789abcdef")


def tree(folder) -> dict[str, tuple[str, int]]:
    """relative path -> (sha256, mtime_ns) of every file under ``folder``."""
    out = {}
    for root, _, files in os.walk(folder):
        for f in files:
            p = os.path.join(root, f)
            out[os.path.relpath(p, folder)] = (hashlib.sha256(open(p, "rb").read()).hexdigest(),
                                               os.stat(p).st_mtime_ns)
    return out


def delivered(outdir) -> list[str]:
    """Audio outputs under OUTDIR: everything but the reports and chainrun's own dot files."""
    return sorted(p for p in tree(outdir) if not os.path.basename(p).startswith((".", "chainrun-report")))


def cookbook_peak(f0: float, gain_db: float, q: float, rate: float) -> np.ndarray:
    """W3C Audio EQ Cookbook peakingEQ, normalised by a0: [b0, b1, b2, 1, a1, a2]."""
    A = 10 ** (gain_db / 40)
    w0 = 2 * math.pi * f0 / rate
    alpha = math.sin(w0) / (2 * q)
    b = np.array([1 + alpha * A, -2 * math.cos(w0), 1 - alpha * A])
    a = np.array([1 + alpha / A, -2 * math.cos(w0), 1 - alpha / A])
    return np.concatenate([b / a[0], a / a[0]])


GENTLE = """
    format: 1
    name: Boathouse Hour gentle pass
    chain:
      - {type: highpass, freq: 60, order: 2}
      - {type: peak, freq: 3000, gain_db: 2, q: 1}
      - {type: gain, gain_db: -3}
"""


@pytest.fixture
def season(tmp_path, write_audio):
    """An input tree of the programme's season: audio in sub-folders, and some files that are not audio."""
    rng = np.random.default_rng(21)
    top = tmp_path / "season"

    def noise(frames, ch, amp=0.3):
        return rng.uniform(-amp, amp, (frames, ch))

    write_audio("season/boathouse/host_stem.wav", noise(6000, 1), 48000, "PCM_24")
    write_audio("season/boathouse/guest_stem.wav", noise(8000, 1), 48000, "FLOAT")
    write_audio("season/boathouse/mix.flac", noise(5000, 2), 44100, "PCM_16")
    write_audio("season/marsh/dawn/ambience.wav", noise(7000, 2), 96000, "PCM_24")
    write_audio("season/marsh/slipway.aiff", noise(4000, 1), 44100, "PCM_16")
    write_audio("season/marsh/take7", noise(3000, 1), 48000, "PCM_16", format="WAV")   # no suffix: by content
    (top / "marsh" / "notes.txt").write_text("tide at 05:10, generator on the slipway\n")
    (top / "cover.png").write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(64))
    (top / "boathouse" / "._host_stem.wav").write_bytes(b"\x00\x05\x16\x07" + bytes(60))
    return top


AUDIO_IN_SEASON = ["boathouse/guest_stem.wav", "boathouse/host_stem.wav", "boathouse/mix.flac",
                   "marsh/dawn/ambience.wav", "marsh/slipway.aiff", "marsh/take7"]


# =========================================================================== tree, skips, inputs


def test_tree_mirrored_non_audio_listed_inputs_untouched(tmp_path, season, write_recipe, run_cli):
    recipe = write_recipe(GENTLE)
    before = tree(season)
    out = tmp_path / "out"
    status, stdout, err = run_cli("run", recipe, season, "-o", out, "--workers", "1")
    assert status == 0, err                 # README.md 'Commands': 0 when every file is ok (skips do not count)
    assert delivered(out) == AUDIO_IN_SEASON          # the tree mirrored, audio only
    for rel in AUDIO_IN_SEASON:
        assert sf.info(str(out / rel)).format == sf.info(str(season / rel)).format
    rep = by_rel(report_of(out))
    skipped = {rel: f["message"] for rel, f in rep.items() if f["status"] == "skipped"}
    assert set(skipped) == {"marsh/notes.txt", "cover.png", "boathouse/._host_stem.wav"}
    assert all("not audio" in m for m in skipped.values()), skipped
    assert all(rep[rel]["status"] == "ok" for rel in AUDIO_IN_SEASON)
    assert tree(season) == before           # README.md 'What the guard promises': inputs are never modified (content and mtime)
    assert temporaries(out) == []


def test_outdir_inside_an_input_folder_is_refused(season, write_recipe, run_cli):
    recipe = write_recipe(GENTLE)
    before = tree(season)
    for out in (season / "out", season / "marsh" / "cleaned"):
        status, stdout, err = run_cli("run", recipe, season, "-o", out)
        assert status == 2
        (line,) = err.strip().splitlines()
        assert "inside the input folder" in line
        assert not out.exists()
    assert tree(season) == before


def test_an_input_inside_the_outdir_is_refused(tmp_path, season, write_recipe, run_cli):
    status, _, err = run_cli("run", write_recipe(GENTLE), season / "marsh", "-o", season)
    assert status == 2 and len(err.strip().splitlines()) == 1
    assert "inside the output folder" in err


def test_a_file_named_twice_is_rendered_once(tmp_path, season, write_recipe, run_cli):
    recipe = write_recipe(GENTLE)
    host = season / "boathouse" / "host_stem.wav"
    out = tmp_path / "out"
    status, _, err = run_cli("run", recipe, host, host, "-o", out, "--workers", "1")
    assert status == 0, err
    assert delivered(out) == ["host_stem.wav"]
    files = report_of(out)["files"]
    assert [f["status"] for f in files].count("ok") == 1
    (dup,) = [f for f in files if f["status"] == "skipped"]
    assert "rendered once" in dup["message"]

    out2 = tmp_path / "out2"          # once through its folder and once by name
    status, _, err = run_cli("run", recipe, season / "boathouse", host, "-o", out2, "--workers", "1")
    assert status == 0, err
    assert delivered(out2) == ["guest_stem.wav", "host_stem.wav", "mix.flac"]
    files = report_of(out2)["files"]
    assert sum("rendered once" in f["message"] for f in files) == 1


# =========================================================================== reports


def test_run_report_json_and_csv(tmp_path, write_recipe, write_audio, run_cli):
    rng = np.random.default_rng(31)
    write_audio("in/stereo48.wav", rng.uniform(-0.25, 0.25, (9000, 2)), 48000, "PCM_24")
    write_audio("in/mono44.wav", rng.uniform(-0.25, 0.25, 7000), 44100, "FLOAT")
    write_recipe("""
        format: 1
        name: house presence
        chain:
          - {type: peak, freq: 3000, gain_db: 3, q: 1.0, label: presence}
    """, name="house/presence.yaml")
    recipe = write_recipe("""
        format: 1
        name: Boathouse stems
        include: house/presence.yaml
        chain:
          - {type: gain, gain_db: -1, label: headroom}
        output: {dither: none}
    """)
    out = tmp_path / "out"
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", out, "--workers", "1")
    assert status == 0, err
    rep = report_of(out)

    # the recipe as resolved: the included chain first, then this recipe's own
    r = rep["recipe"]
    assert [s["type"] for s in r["chain"]] == ["peak", "gain"]
    assert r["chain"][0]["freq"] == 3000 and r["chain"][0]["label"] == "presence"
    assert len(r["includes"]) == 1 and r["includes"][0].endswith("presence.yaml")
    assert r["output"]["dither"] == "none" and r["guard"]["on_over"] == "reject"
    assert rep["recipe_digest"] == load(str(recipe)).digest and set(rep["recipe_digest"]) <= HEX64
    assert len(rep["recipe_digest"]) == 64
    assert rep["chainrun_version"] == chainrun.__version__

    # designed coefficients and assessment per sample rate
    rates = {d["rate_hz"]: d for d in rep["rates"]}
    assert sorted(rates) == [44100, 48000]
    for rate, d in rates.items():
        assert d["usable"] is True and d["error"] is None
        sos = np.array(d["chain"]["sos"])
        # W3C Audio EQ Cookbook: peakingEQ coefficients, normalised by a0
        np.testing.assert_allclose(sos[0], cookbook_peak(3000, 3, 1.0, rate), rtol=1e-12, atol=1e-15)
        # analytic: a flat gain of -1 dB is b0 = 10^(-1/20)
        np.testing.assert_allclose(sos[1], [10 ** (-1 / 20), 0, 0, 1, 0, 0], rtol=1e-12, atol=0)
        a = d["assessment"]
        assert a["accepted"] is True
        # W3C Audio EQ Cookbook: the peakingEQ boost is largest at f0 and equals dBgain; -1 dB flat
        assert abs(a["max_gain_db"] - 2.0) < 1e-3
        assert abs(a["max_gain_hz"] - 3000) < 30
        # analytic: the L1 norm of the impulse response is never below max |H|
        assert a["worst_case_peak_gain"] >= 10 ** (2.0 / 20) * (1 - 1e-9)

    # per file: status, per-channel meters in and out, timings
    files = by_rel(rep)
    assert set(files) == {"stereo48.wav", "mono44.wav"}
    rec = load(str(recipe))
    for rel, ch, rate in (("stereo48.wav", 2, 48000), ("mono44.wav", 1, 44100)):
        f = files[rel]
        assert f["status"] == "ok" and f["rate_hz"] == rate and f["channels"] == ch
        assert isinstance(f["seconds"], float) and f["seconds"] >= 0
        x, _ = sf.read(str(tmp_path / "in" / rel), dtype="float64", always_2d=True)
        y = signal.sosfilt(design(rec, rate).sos, x, axis=0)      # scipy.signal.sosfilt (reference library)
        assert len(f["input_meters"]["channels"]) == ch and len(f["output_meters"]["channels"]) == ch
        for c in range(ch):
            cin, cout = f["input_meters"]["channels"][c], f["output_meters"]["channels"][c]
            # analytic: sample peak = max |x| of the samples read back
            assert abs(cin["peak"] - np.abs(x[:, c]).max()) < 1e-12
            # the output's peak before quantisation, from the reference filter
            assert abs(cout["peak"] - np.abs(y[:, c]).max()) < 1e-9
            # analytic: RMS = sqrt(mean x^2)
            assert abs(cin["rms"] - math.sqrt(np.mean(x[:, c] ** 2))) < 1e-9
    summary = rep["summary"]
    assert summary["files"] == 2 and summary["ok"] == 2 and summary["wall_seconds"] >= 0

    # CSV: a row per file, the same statuses as the JSON
    with open(out / "chainrun-report.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == len(rep["files"])
    assert {os.path.basename(row["input"]): row["status"] for row in rows} == {"stereo48.wav": "ok",
                                                                                "mono44.wav": "ok"}
    for row in rows:
        f = files[os.path.basename(row["input"])]
        worst = max(c["peak_dbfs"] for c in f["output_meters"]["channels"])
        assert abs(float(row["out_peak_dbfs"]) - worst) < 0.006          # two decimals
    assert (out / "chainrun-report.html").exists()


def test_report_path_option_puts_all_reports_there(tmp_path, season, write_recipe, run_cli):
    out, rep_dir = tmp_path / "out", tmp_path / "reports"
    status, _, err = run_cli("run", write_recipe(GENTLE), season / "boathouse", "-o", out, "--workers", "1",
                             "--report", rep_dir / "week12.json")
    assert status == 0, err
    assert sorted(os.listdir(rep_dir)) == ["week12.csv", "week12.html", "week12.json"]
    assert not (out / "chainrun-report.json").exists()


# =========================================================================== exit codes


def test_unstable_recipe_exit_2_and_nothing_written(tmp_path, repo_root, season, run_cli):
    out = tmp_path / "out"
    before = tree(season)
    status, stdout, err = run_cli("run", repo_root / "recipes" / "unstable-hand-typed.yaml", season, "-o", out)
    assert status == 2
    (line,) = err.strip().splitlines()
    assert "unstable" in line and "no audio was touched" in line
    assert ":11:41: error:" in line                   # located at the offending coefficients
    assert not out.exists()                           # nothing written, not even the folder
    assert tree(season) == before


@pytest.mark.parametrize("argv_tail, needle", [
    (["--block-size", "0"], "--block-size"),
    (["--workers", "0"], "--workers"),
    (["--on-over", "fold"], "--on-over"),
])
def test_usage_errors_exit_2(tmp_path, season, write_recipe, run_cli, argv_tail, needle):
    out = tmp_path / "out"
    status, _, err = run_cli("run", write_recipe(GENTLE), season, "-o", out, *argv_tail)
    assert status == 2 and needle in err
    assert not out.exists()


def test_bad_recipe_and_missing_input_exit_2(tmp_path, season, write_recipe, run_cli):
    bad = write_recipe("format: 1\nchain:\n  - {type: peak, freq: 3000, gain_db: loud, q: 1}\n", name="bad.yaml")
    status, _, err = run_cli("run", bad, season, "-o", tmp_path / "o1")
    assert status == 2
    (line,) = err.strip().splitlines()
    assert line.startswith(f"{bad}:3:") and "error:" in line
    status, _, err = run_cli("run", write_recipe(GENTLE), tmp_path / "no-such-folder", "-o", tmp_path / "o2")
    assert status == 2 and len(err.strip().splitlines()) == 1 and "no such file" in err
    assert not (tmp_path / "o1").exists() and not (tmp_path / "o2").exists()


def test_unreadable_file_exit_1_others_delivered(tmp_path, season, write_recipe, run_cli):
    (season / "marsh" / "broken.wav").write_bytes(b"RIFF\x10\x00\x00\x00WAVEfmt garbage")
    out = tmp_path / "out"
    status, _, err = run_cli("run", write_recipe(GENTLE), season, "-o", out, "--workers", "1")
    assert status == 1
    rep = by_rel(report_of(out))
    assert rep["marsh/broken.wav"]["status"] == "failed"
    assert "\n" not in rep["marsh/broken.wav"]["message"]
    (line,) = [ln for ln in err.splitlines() if "broken.wav" in ln]
    assert "error" in line
    assert delivered(out) == AUDIO_IN_SEASON


def test_rate_where_the_recipe_cannot_be_used(tmp_path, write_recipe, write_audio, run_cli):
    rng = np.random.default_rng(41)
    write_audio("in/phone_line.wav", rng.uniform(-0.3, 0.3, 4000), 8000, "PCM_16")
    write_audio("in/studio.wav", rng.uniform(-0.3, 0.3, 4000), 48000, "PCM_16")
    recipe = write_recipe("""
        format: 1
        chain:
          - {type: highpass, freq: 100, order: 2}
          - {type: high_shelf, freq: 6000, gain_db: 1.5, slope: 1}
    """)
    out = tmp_path / "out"
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", out, "--workers", "1")
    assert status == 1
    rep = by_rel(report_of(out))
    assert rep["studio.wav"]["status"] == "ok"
    bad = rep["phone_line.wav"]
    # analytic: 6000 Hz is above the 4000 Hz Nyquist frequency of an 8 kHz file
    assert bad["status"] == "rejected" and "Nyquist" in bad["message"] and "\n" not in bad["message"]
    assert delivered(out) == ["studio.wav"]
    rates = {d["rate_hz"]: d for d in report_of(out)["rates"]}
    assert rates[8000]["usable"] is False and rates[48000]["usable"] is True

    # every file at 8 kHz: the recipe is rejected for the whole batch, exit 2, nothing written
    os.unlink(tmp_path / "in" / "studio.wav")
    out2 = tmp_path / "out2"
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", out2, "--workers", "1")
    assert status == 2 and len(err.strip().splitlines()) == 1 and "every sample rate" in err
    assert not out2.exists()


# =========================================================================== workers


def test_two_workers_give_the_same_outputs_as_one(tmp_path, season, write_recipe, write_audio, run_cli):
    write_audio("season/marsh/hot.wav", np.full(3000, 0.99), 48000, "PCM_24")        # rejected: +2 dB
    recipe = write_recipe("""
        format: 1
        chain:
          - {type: low_shelf, freq: 200, gain_db: 2, slope: 1}
        output: {subtype: PCM_16}
    """)
    outs = {}
    for w in ("1", "2"):
        out = tmp_path / f"out-w{w}"
        status, _, err = run_cli("run", recipe, season, "-o", out, "--workers", w)
        assert status == 1, err
        outs[w] = out
    assert delivered(outs["1"]) == delivered(outs["2"]) == AUDIO_IN_SEASON
    for rel in AUDIO_IN_SEASON:
        # contract (README): dither seeded by the relative path, so any worker gives the same bytes
        assert (outs["1"] / rel).read_bytes() == (outs["2"] / rel).read_bytes(), rel

    def comparable(out):
        keep = ("relpath", "status", "message", "out_subtype", "dither", "over_db", "clipped_by_chainrun",
                "output_meters")
        return {f["relpath"]: {k: f[k] for k in keep} for f in report_of(out)["files"]}

    assert comparable(outs["1"]) == comparable(outs["2"])
    assert comparable(outs["1"])["marsh/hot.wav"]["status"] == "rejected"


@pytest.mark.parametrize("workers, files, threads", [("1", 1, 1), ("1", 3, 1), ("2", 1, 2), ("2", 3, 1)])
def test_workers_are_cores(tmp_path, write_audio, write_recipe, run_cli, monkeypatch, workers, files, threads):
    # contract (README, "Commands"): --workers N keeps at most N cores busy. One worker renders every
    # file in one thread; with more, several files go to worker processes, each rendering in one
    # thread, and a file rendered alone gets the pipeline threads.
    log = tmp_path / "threads.log"
    real = executors.render_file

    def spy(src, dst, sos, bound, policy, **kw):
        with open(log, "a") as fh:          # a file: worker processes are forked, lists would stay there
            fh.write(f"{policy.threads}\n")
        return real(src, dst, sos, bound, policy, **kw)

    monkeypatch.setattr(executors, "render_file", spy)
    for i in range(files):
        write_audio(f"in/take{i}.wav", np.full((2000, 2), 0.1), 48000, "PCM_24")
    status, _, err = run_cli("run", write_recipe(GENTLE), tmp_path / "in", "-o", tmp_path / "out",
                             "--workers", workers)
    assert status == 0, err
    assert log.read_text().split() == [str(threads)] * files


# =========================================================================== faults inside a batch


def test_disk_full_in_one_file_fails_it_and_leaves_no_temporaries(tmp_path, season, write_recipe, run_cli,
                                                                   monkeypatch):
    real_write = sf.SoundFile.write
    calls = {}

    def full_disk(self, data):
        if "guest_stem" in self.name:
            calls[self.name] = calls.get(self.name, 0) + 1
            if calls[self.name] == 3:
                raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real_write(self, data)

    monkeypatch.setattr(sf.SoundFile, "write", full_disk)      # in-process: --workers 1
    out = tmp_path / "out"
    status, _, err = run_cli("run", write_recipe(GENTLE), season, "-o", out, "--workers", "1",
                             "--block-size", "1000")
    assert status == 1
    rep = by_rel(report_of(out))
    bad = rep["boathouse/guest_stem.wav"]
    assert bad["status"] == "failed" and bad["output"] is None
    assert "no space left on device" in bad["message"] and "\n" not in bad["message"]
    assert delivered(out) == [p for p in AUDIO_IN_SEASON if p != "boathouse/guest_stem.wav"]
    assert temporaries(out) == []
    (line,) = [ln for ln in err.splitlines() if "guest_stem" in ln and not ln.startswith("chainrun: [")]
    assert "no space left on device" in line


def test_failed_rerun_keeps_the_older_output(tmp_path, season, write_recipe, run_cli):
    out = tmp_path / "out"
    status, _, err = run_cli("run", write_recipe(GENTLE), season / "boathouse", "-o", out, "--workers", "1")
    assert status == 0, err
    old = (out / "host_stem.wav").read_bytes()
    # a changed recipe that passes the ceiling: rejected this time
    loud = write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: 12}\n", name="loud.yaml")
    status, _, err = run_cli("run", loud, season / "boathouse", "-o", out, "--workers", "1")
    assert status == 1
    rep = by_rel(report_of(out))
    assert rep["host_stem.wav"]["status"] == "rejected" and rep["host_stem.wav"]["output"] is None
    # contract (README, "Output and reports"): the final name is only ever replaced by a complete new file,
    # so the earlier run's output stays as it was (its recipe may be gone); the report says it is not this run's
    assert (out / "host_stem.wav").read_bytes() == old
    assert "is an earlier run's, left as it was, not this run's result" in rep["host_stem.wav"]["message"]
    assert temporaries(out) == []


def test_a_file_rejected_at_its_rate_says_an_earlier_output_is_not_this_run_s(tmp_path, write_recipe,
                                                                              write_audio, run_cli):
    rng = np.random.default_rng(43)
    write_audio("in/phone_line.wav", rng.uniform(-0.3, 0.3, 4000), 8000, "PCM_16")
    write_audio("in/studio.wav", rng.uniform(-0.3, 0.3, 4000), 48000, "PCM_16")
    out = tmp_path / "out"
    status, _, err = run_cli("run", write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: -1}\n"),
                             tmp_path / "in", "-o", out, "--workers", "1")
    assert status == 0, err
    old = (out / "phone_line.wav").read_bytes()
    shelf = write_recipe("format: 1\nchain:\n  - {type: high_shelf, freq: 6000, gain_db: 1.5, slope: 1}\n",
                         name="shelf.yaml")
    status, _, err = run_cli("run", shelf, tmp_path / "in", "-o", out, "--workers", "1")
    assert status == 1
    rep = by_rel(report_of(out))
    # analytic: 6000 Hz is above the 4000 Hz Nyquist frequency of an 8 kHz file
    assert rep["phone_line.wav"]["status"] == "rejected"
    assert "earlier run's, left as it was" in rep["phone_line.wav"]["message"]
    assert "earlier run's" in err and "\n" not in rep["phone_line.wav"]["message"]
    assert (out / "phone_line.wav").read_bytes() == old
    assert rep["studio.wav"]["status"] == "ok" and "earlier" not in (rep["studio.wav"]["message"] or "")


def test_runtime_guard_in_a_batch(tmp_path, season, write_recipe, run_cli, monkeypatch):
    from chainrun import guard
    real_assess = guard.assess

    def optimistic(chain, guard, recipe=None):
        a = real_assess(chain, guard, recipe)
        return dataclasses.replace(a, peak_gain=a.peak_gain * 0.05)     # a bound far too small

    monkeypatch.setattr(guard, "assess", optimistic)            # in-process: --workers 1
    out = tmp_path / "out"
    status, _, err = run_cli("run", write_recipe(GENTLE), season / "boathouse", "-o", out, "--workers", "1")
    assert status == 1
    files = [f for f in report_of(out)["files"] if f["status"] != "skipped"]      # ._host_stem.wav
    assert len(files) == 3 and {f["status"] for f in files} == {"failed"}
    assert all("worst-case bound" in f["message"] for f in files)
    assert delivered(out) == [] and temporaries(out) == []


# =========================================================================== file names


def test_a_file_name_that_is_not_utf8_is_rendered(tmp_path, write_audio, write_recipe, run_cli):
    src = write_audio("in/take.wav", np.random.default_rng(51).uniform(-0.3, 0.3, 3000), 48000, "PCM_16")
    raw = os.fsencode(str(tmp_path / "in")) + b"/Wrenmouth_m\xe9t\xe9o.wav"      # Latin-1 bytes, as old cards write
    try:
        os.rename(os.fsencode(str(src)), raw)
    except OSError:                                                              # pragma: no cover
        pytest.skip("this file system does not take names that are not UTF-8")
    out = tmp_path / "out"
    status, _, err = run_cli("run", write_recipe(GENTLE), tmp_path / "in", "-o", out, "--workers", "1")
    assert status == 0, err
    assert os.listdir(os.fsencode(str(out))).count(b"Wrenmouth_m\xe9t\xe9o.wav") == 1
    (f,) = report_of(out)["files"]
    assert f["status"] == "ok" and f["relpath"] == "Wrenmouth_m\\xe9t\\xe9o.wav"    # shown as \xNN in the report


# =========================================================================== report and output-folder faults


def test_report_path_that_cannot_be_written_is_one_line(tmp_path, season, write_recipe, run_cli):
    (tmp_path / "afile").write_text("not a folder")
    status, _, err = run_cli("run", write_recipe(GENTLE), season / "boathouse", "-o", tmp_path / "out",
                             "--workers", "1", "--report", tmp_path / "afile" / "r.json")
    assert status in (1, 2) and len(err.strip().splitlines()) == 1 and "report" in err


def test_output_subfolder_blocked_by_a_file_fails_that_file_only(tmp_path, season, write_recipe, run_cli):
    out = tmp_path / "out"
    out.mkdir()
    (out / "marsh").write_text("a file where the marsh/ output folder would go")
    status, _, err = run_cli("run", write_recipe(GENTLE), season, "-o", out, "--workers", "1")
    assert status == 1
    rep = by_rel(report_of(out))
    assert rep["marsh/slipway.aiff"]["status"] == "failed"
    assert rep["boathouse/host_stem.wav"]["status"] == "ok"


def test_the_note_about_an_earlier_output_is_said_once(tmp_path):
    # execute may run twice on one Prepared (library use); the note must not pile up
    out = tmp_path / "out"
    out.mkdir()
    (out / "a.wav").write_bytes(b"an earlier run's output")
    (tmp_path / "a.wav").write_bytes(b"input")
    job = Job(str(tmp_path / "a.wav"), "a.wav", str(out / "a.wav"))
    r = chainrun.results.FileResult(job.input, job.relpath, "rejected", "over the ceiling")
    batch_run._note_earlier_output(job, r)
    batch_run._note_earlier_output(job, r)
    assert r.message == ("over the ceiling; the file under its output name is an earlier run's, left as it was, "
                         "not this run's result")


@pytest.mark.parametrize("given, base", [
    ("rep/night.json", "rep/night"), ("rep/night.JSON", "rep/night"),
    ("rep/night.2024.06.01", "rep/night.2024.06.01"), ("rep/night", "rep/night"),
    ("rep/", "rep/chainrun-report")])
def test_report_option_keeps_every_dot_part_but_json(given, base):
    # two nights named night.2024.06.01 and night.2024.06.02 must not share (and overwrite) one report
    from chainrun.report.write import report_paths

    paths = report_paths(None, given)
    assert paths == {"json": base + ".json", "csv": base + ".csv", "html": base + ".html"}


def test_the_json_report_keeps_the_run_s_notes(tmp_path, write_recipe, write_audio, run_cli):
    write_audio("in/a.wav", np.zeros(2000), 48000, "PCM_16")
    recipe = write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: -1}\n")
    out = tmp_path / "out"
    assert run_cli("run", recipe, tmp_path / "in", "-o", out, "--workers", "1")[0] == 0
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", out, "--workers", "1")
    assert status == 0, err
    notes = report_of(out)["notes"]
    assert any("already delivered by an earlier run" in n for n in notes), notes
