"""`benchkit watch`: the live readout follows the stage as it is adjusted.

References: a stage y = g x + a2 x^2 driven with x = A cos gives
H2/H1 = a2 A / (2 g) (the power-reduction identity cos^2 = (1 + cos 2)/2);
the se-class-a model's own steady-tone figure (a tone run through the same
model) for its bias change. The rest is plumbing: outputs parse, every
exit leaves silence, the readings are kept.
"""

from __future__ import annotations

import json
import math
import signal
import subprocess
import sys
import time

import numpy as np
import pytest
import soundfile as sf

from benchkit.capture.virtual import virtual_bench
from benchkit.report.live import sparkline
from benchkit.kinds.tone import tone_run
from benchkit.analysis.readings import Tracker
from benchkit.kinds.watch import block_seconds, SteadyTone, UPDATE_S, Watch

from conftest import run_cli, the_run

DRIVE = -20.0
A = 2.0 * 10 ** (DRIVE / 20)  # volts peak into the stage: the virtual output is 2 V peak per FS


def _watch(bench, count, change=None, at=6):
    """Watch on the virtual bench for ``count`` readings (ten a second of
    stream); ``change()`` runs from this (the test's) thread once ``at``
    readings have come."""
    scale = bench.inputs()[0].volts_per_fs
    tone = SteadyTone(997.0, DRIVE, bench.sample_rate_hz, None, volts_per_fs=scale)
    w = Watch(bench, tone).start()
    got, changed = [], None
    for r in w.readings():
        if r is None:
            continue
        got.append(r)
        if len(got) == count:
            w.stop("done")
        if change is not None and len(got) == at:
            change()
            changed = len(got)
    w.join()
    assert w.error is None
    return got, changed


def after(got, k):
    """The readings whose whole block was recorded after the change made
    once reading ``k`` had come: their block starts past that reading's end
    plus the round trip, a stream block and the test thread's delay (the
    virtual bench's longest round trip and block: 62.5 + 20 ms; 0.15 s in all)."""
    block_s = block_seconds(997.0)
    late = [r for r in got if r.t_s - block_s > got[k - 1].t_s + 0.15]
    assert len(late) >= 3
    return late


def test_h2_follows_a_changed_square_term_within_two_updates():
    bench = virtual_bench("poly", {"gain": 10.0, "a2": 0.1}, seed=4)
    got, k = _watch(bench, 15, lambda: bench.stage.params.update(a2=0.3))
    want = [20 * math.log10(a2 * A / (2 * 10.0)) for a2 in (0.1, 0.3)]  # identity, above
    assert all(r.h2_dbc == pytest.approx(want[0], abs=0.2) for r in got[:k])
    # a reading whose block holds only the new stage reads the new identity
    assert all(r.h2_dbc == pytest.approx(want[1], abs=0.2) for r in after(got, k))
    # ten updates a second, at the pace of the clock
    gaps = np.diff([r.t_s for r in got])
    assert np.allclose(gaps, UPDATE_S, atol=0.005) and UPDATE_S <= 0.1


def test_readings_follow_a_bias_change_as_the_model_predicts(tmp_path):
    bench = virtual_bench("se-class-a", {"bias": 0.8}, seed=5)
    got, k = _watch(bench, 15, lambda: bench.stage.params.update(bias=1.2))
    # the model's own steady-tone figures at each bias, from a tone run
    ref = {b: tone_run(virtual_bench("se-class-a", {"bias": b}, seed=6), tmp_path / f"b{b}", 997.0, [DRIVE])
           .steps[0].result for b in (0.8, 1.2)}
    h2 = {b: next(h.level_dbc for h in r.harmonics if h.order == 2) for b, r in ref.items()}
    assert h2[1.2] < h2[0.8] - 3  # more bias current, less second harmonic
    assert got[k - 1].h2_dbc == pytest.approx(h2[0.8], abs=0.5)
    assert all(r.h2_dbc == pytest.approx(h2[1.2], abs=0.5) for r in after(got, k))
    assert all(r.thdn_db == pytest.approx(ref[1.2].thdn_db, abs=0.5) for r in after(got, k))


def test_a_lost_tone_is_marked():
    bench = virtual_bench("poly", {"gain": 10.0}, seed=7)
    got, k = _watch(bench, 12, lambda: bench.stage.params.update(gain=1e-4), at=3)
    assert not any(r.tone_lost for r in got[:k])
    assert all(r.tone_lost for r in after(got, k))


def test_a_reading_across_a_stream_dropout_is_marked_and_left_out(tmp_path):
    # a clean tone y = x + a2 x^2 (H2/H1 = a2 A / 2, power-reduction
    # identity) fed block by block as a backend would, with 10 ms of it lost
    # at one point and the callback there flagged: the readings whose block
    # spans it are marked, every other one reads the identity
    from benchkit.kinds.watch import ReadingsLog, summarise

    rate, f, a2, amp = 48000.0, 997.0, 0.2, 0.1
    got = []
    tone = SteadyTone(f, 20 * math.log10(amp), rate, got.append)
    n = np.arange(int(3.0 * rate))
    x = amp * np.sin(2 * np.pi * f * n / rate)
    y = x + a2 * x * x
    cut, gap, blk = int(1.5 * rate), int(0.01 * rate), 1024
    y = np.concatenate([y[:cut], y[cut + gap:]])  # the samples the dropout lost
    for pos in range(0, y.size - blk, blk):
        if pos <= cut < pos + blk:
            tone.fault(pos, blk)
        tone.listen(y[pos : pos + blk, None], pos)
    want = 20 * math.log10(a2 * amp / 2)
    marked = [r for r in got if r.disturbed]
    assert marked and all(r.t_s * rate - tone.block_n - blk <= cut <= r.t_s * rate + blk for r in marked)
    assert all(r.h2_dbc == pytest.approx(want, abs=0.1) for r in got if not r.disturbed)
    assert any(abs(r.thdn_db - want) > 3 for r in marked)  # what the mark keeps out
    tracker, log = Tracker(), ReadingsLog(tmp_path / "readings.csv")
    for r in got:
        tracker.add(r)
        log.add(r)
    log.close()
    assert tracker.disturbed == len(marked) and tracker.max["thdn_db"] == pytest.approx(want, abs=0.1)
    doc = summarise(tmp_path / "readings.csv")
    assert doc["figures"]["thdn_db"]["max"] == pytest.approx(want, abs=0.1)
    assert any(w["code"] == "dropout" and "dropout" in w["text"] for w in doc["warnings"])


def test_tracker_keeps_min_max_trend_and_resets():
    from benchkit.analysis.readings import Reading

    def reading(t, thdn):
        return Reading(t, -20.0, 1.0, None, thdn, thdn, thdn, None, -90.0, None, False, False)

    tr = Tracker(trend=5)
    for k, v in enumerate([-60.0, -62.0, -58.0, -61.0, -59.0, -63.0]):
        tr.add(reading(0.2 * k, v))
    assert tr.min["thdn_db"] == -63.0 and tr.max["thdn_db"] == -58.0
    assert list(tr.history["thdn_db"]) == [-62.0, -58.0, -61.0, -59.0, -63.0]  # the last five
    tr.toggle_hold()
    tr.add(reading(2.0, -50.0))
    assert tr.shown.thdn_db == -63.0 and tr.last.thdn_db == -50.0
    tr.reset()
    assert tr.min == {} and tr.count == 0
    assert sparkline([1, 2, 3, 4, 5, 6, 7, 8]) == "▁▂▃▄▅▆▇█"


def test_plain_and_json_lines_parse():
    plain = run_cli("watch", "--duration", "1.5", "--plain", "--load", "8")
    assert plain.returncode == 0, plain.stderr
    lines = plain.stdout.strip().splitlines()
    assert len(lines) >= 3 and all("THD+N" in line and "H2" in line for line in lines)
    js = run_cli("watch", "--duration", "1.5", "--json-lines", "--load", "8")
    assert js.returncode == 0, js.stderr
    docs = [json.loads(line) for line in js.stdout.strip().splitlines()]
    assert len(docs) >= 3 and all(d["kind"] == "reading" and d["power_w"] > 0 for d in docs)
    assert "faded to silence" in js.stderr


def test_ctrl_c_leaves_silence_and_a_valid_run(tmp_path):
    bench = tmp_path / "bench"
    proc = subprocess.Popen([sys.executable, "-m", "benchkit", "watch", "--json-lines", "--record", "--record-audio",
                             "--tag", "trim=R7", "--bench", str(bench)], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True)
    seen = [proc.stdout.readline() for _ in range(4)]
    proc.send_signal(signal.SIGINT)
    rest, err = proc.communicate(timeout=30)
    assert proc.returncode == 130, err
    assert "Traceback" not in err and "faded to silence" in err
    run = the_run(bench)
    record = json.loads((run / "run.json").read_text())
    assert record["status"] == "complete" and record["tags"] == {"trim": "R7"}
    rows = (run / "readings.csv").read_text().strip().splitlines()
    assert len(rows) - 1 == len(seen) + len(rest.strip().splitlines())
    summary = json.loads((run / "watch.json").read_text())
    assert summary["kind"] == "watch" and summary["readings"] == len(rows) - 1
    # the recording's input 2 is the output looped back: full level, then
    # a 20 ms fade to silence (40 dB down: the interface's 3 Hz coupling
    # leaves a tail of about 3/997 of the tone decaying with 53 ms), then
    # silence to the end
    data, rate = sf.read(run / "audio.wav", always_2d=True)
    ref = np.abs(data[:, 1])
    loud = np.flatnonzero(ref > 0.5 * 10 ** (DRIVE / 20))
    silent = np.flatnonzero(ref > 10 ** ((DRIVE - 40) / 20))[-1] + 1
    assert silent - loud[-1] < int(0.05 * rate) and data.shape[0] - silent > int(0.02 * rate)
    listed = json.loads(run_cli("log", "list", "--bench", str(bench), "--json").stdout)["runs"]
    assert listed[0]["command"] == "watch" and listed[0]["figures"][0]["name"] == "thdn_db"
    again = run_cli("log", "reanalyse", "last", "--bench", str(bench), "--json")
    assert again.returncode == 0 and json.loads(again.stdout)["figures"] == summary["figures"]


def test_a_clipping_input_stops_the_watch(tmp_path):
    # a stage whose gain grows with level passes the pre-flight's low probe
    # step: y = x + 5000 x^3 makes 0.05 V of 0.02 V at -40 dBFS, but 40 V
    # peak of 0.2 V at -20 dBFS (4 V after the 10:1 pad, twice the input's
    # full scale): the input clips, the watch fades out and says it stopped early
    res = run_cli("watch", "--sim", "poly", "--sim-param", "gain=1", "--sim-param", "a3=5000", "--level", "-20dBFS",
                  "--plain", "--duration", "5", "--bench", str(tmp_path))
    assert res.returncode == 4 and "stopped early" in res.stderr and "clipped" in res.stderr, res.stderr
    assert "Traceback" not in res.stderr


def test_a_given_gain_is_checked_against_the_stage(tmp_path):
    # a --gain of 1 for a stage of gain 200 (46 dB more): the probe step
    # finds it out, and the pre-flight refuses the level on the measured gain
    res = run_cli("watch", "--sim", "ideal", "--sim-param", "gain=200", "--gain", "1", "--level", "-20dBFS",
                  "--plain", "--duration", "5", "--bench", str(tmp_path))
    assert res.returncode == 1 and "Traceback" not in res.stderr
    assert "measured 200 V/V" in res.stderr and "46.0 dB over the 1 V/V given" in res.stderr
    # a given gain within a decibel of the stage's is taken as given
    ok = run_cli("tone", "--sim", "ideal", "--sim-param", "gain=10", "--gain", "10", "--level", "-30dBFS",
                 "--bench", str(tmp_path), "--json")
    assert ok.returncode == 0 and "V/V given" not in ok.stderr, ok.stderr


def test_keys_on_a_terminal_hold_reset_and_stop(tmp_path):
    # a pseudo-terminal stands in for the bench's: the live table, and keys without Enter
    import os
    import pty
    import select

    master, slave = pty.openpty()
    proc = subprocess.Popen([sys.executable, "-m", "benchkit", "watch", "--duration", "30"], stdin=slave, stdout=slave,
                            stderr=subprocess.PIPE, text=True, close_fds=True)
    os.close(slave)

    def read_until(marker, guard_s=60):
        """What the terminal shows until ``marker`` appears (the guard only
        catches a hang: on a busy machine the screen takes its time)."""
        got, end = b"", time.monotonic() + guard_s
        while marker not in got and time.monotonic() < end:
            if select.select([master], [], [], 0.05)[0]:
                try:
                    got += os.read(master, 65536)
                except OSError:  # the watch has ended and closed the terminal
                    break
        return got

    shown = read_until(b"readings.")
    os.write(master, b"h")
    held = read_until(b"HELD")
    os.write(master, b"r")
    read_until(b"readings.")  # the next screen after the reset
    os.write(master, b"q")
    _, err = proc.communicate(timeout=30)
    os.close(master)
    assert proc.returncode == 0, err
    assert b"THD+N" in shown and b"HELD" in held
    assert "stopped (q)" in err and "faded to silence" in err


def test_a_watch_that_ends_before_its_first_reading_is_filed_failed(tmp_path):
    # a watch can end (its duration out, the input clipping as the tone comes
    # in) before its first reading: no summary of nothing, no error of it; the
    # run is filed as failed and says why
    res = run_cli("watch", "--sim", "ideal", "--plain", "--duration", "0.01", "--record", "--bench", str(tmp_path))
    assert res.returncode == 0 and "0 readings" in res.stderr and "Traceback" not in res.stderr, res.stderr
    (run,) = json.loads(run_cli("log", "list", "--bench", str(tmp_path), "--json").stdout)["runs"]
    assert run["status"] == "failed" and "before its first reading" in run["error"]


def test_a_watch_without_record_files_nothing(tmp_path):
    # --record keeps the readings as a run; without it the bench folder is not touched
    res = run_cli("watch", "--sim", "ideal", "--plain", "--duration", "1.5", "--bench", str(tmp_path / "bench"))
    assert res.returncode == 0 and "THD+N" in res.stdout, res.stderr
    assert not (tmp_path / "bench").exists()
    res = run_cli("watch", "--record-audio", "--duration", "0.3", "--bench", str(tmp_path / "bench"))
    assert res.returncode == 1 and "--record-audio goes with --record" in res.stderr


def test_a_steady_figures_trend_is_flat_and_a_real_change_shows():
    # the trend spans at least eight times the figure's resolution: 1.414 V scattered by 20 uV (under a
    # tenth of a percent) draws one flat line, not the full height; a 1 % rise draws bottom to top.
    # (The resolutions are the readout's own choice: plumbing, no outside source.)
    from benchkit.analysis.readings import resolution

    steady = [1.414 + 20e-6 * (-1) ** k for k in range(10)]
    assert len(set(sparkline(steady, resolution=resolution("level_vrms", steady)))) == 1
    rising = [1.414] * 5 + [1.414 * 1.01] * 5
    bars = sparkline(rising, resolution=resolution("level_vrms", rising))
    assert bars[0] == "▁" and bars[-1] == "█"
    # THD+N wandering by 0.02 dB: flat; by 2 dB: the full height
    assert len(set(sparkline([-60.0, -60.02, -59.99, -60.01], resolution=resolution("thdn_db", [])))) == 1
    assert set(sparkline([-62.0, -60.0], resolution=resolution("thdn_db", []))) == {"▁", "█"}


def test_the_residual_is_the_harmonic_the_block_holds():
    # a sine plus its 2nd harmonic at -40 dBc (amplitude ratio 0.01) and no noise: THD+N's residual is
    # the harmonic alone, 40 dB under the fundamental (dBFS, AES17) and 1 % of its volts (handbook identity)
    rate, scale = 48000.0, 2.5
    n = np.arange(12000)
    x = 0.3 * np.sin(2 * np.pi * 997.0 * n / rate) + 0.003 * np.sin(2 * np.pi * 1994.0 * n / rate + 0.4)
    tone = SteadyTone(997.0, DRIVE, rate, None, volts_per_fs=scale)
    r = tone.analyse(x, 0.25)
    assert r.residual_dbfs == pytest.approx(20 * math.log10(0.3) - 40.0, abs=0.02)
    assert r.residual_vrms == pytest.approx(0.003 * scale / math.sqrt(2), rel=0.003)


def test_the_spectrum_average_is_the_power_mean_of_the_last_blocks():
    # the power mean of the last N spectra, against numpy on the same powers; and white Gaussian noise's
    # periodogram is exponentially distributed (chi-square, 2 degrees of freedom: handbook), so the mean
    # of N independent ones scatters by 1/sqrt(N) of its value
    from benchkit.analysis.readings import SpectrumAverage

    rng = np.random.default_rng(3)
    freq = np.arange(4097.0)
    blocks = [rng.exponential(1e-8, freq.size) for _ in range(40)]
    avg = SpectrumAverage(16)
    for p in blocks:
        avg.add(freq, 10 * np.log10(p))
    got_f, got = avg.mean_dbfs()
    assert avg.held == 16 and np.allclose(got, 10 * np.log10(np.mean(blocks[-16:], axis=0)), atol=1e-9)
    power = 10 ** (got / 10)
    assert np.std(power) / np.mean(power) == pytest.approx(1 / math.sqrt(16), rel=0.08)
    avg.set_count(4)  # fewer: the last four only
    assert np.allclose(avg.mean_dbfs()[1], 10 * np.log10(np.mean(blocks[-4:], axis=0)), atol=1e-9)


def test_the_spectrum_view_marks_the_harmonics_on_a_log_axis():
    # the columns of a log-frequency axis: column c spans lo (hi/lo)^(c/cols) to lo (hi/lo)^((c+1)/cols);
    # the fundamental's and each harmonic's mark stands in the column holding its frequency, and the
    # fundamental's bar reaches its level (-20 dBFS) to the eighth of a row
    from benchkit.analysis.readings import SpectrumAverage
    from benchkit.analysis.tone import analyze_tone
    from benchkit.report.live import SPECTRUM_COLS, SPECTRUM_DB_ROW, spectrum_view

    rate, f0 = 48000.0, 997.0
    n = np.arange(12000)
    x = 0.1 * np.sin(2 * np.pi * f0 * n / rate) + 1e-3 * np.sin(2 * np.pi * 2 * f0 * n / rate)
    r = analyze_tone(x, rate, fundamental_hz=f0, traces=True)
    avg = SpectrumAverage(1)
    avg.add(r.traces.freq_hz, r.traces.spectrum_dbfs)
    lines = spectrum_view(avg, f0, (20.0, 20000.0)).plain.splitlines()
    marks = lines[-2][6:]

    def column(f):
        return int(math.floor(SPECTRUM_COLS * math.log(f / 20.0) / math.log(1000.0)))

    for k in range(1, 10):
        assert marks[column(k * f0)] == ("f" if k == 1 else str(k))
    bars = [line[6:] for line in lines[1:-2]]
    top = float(lines[1][:6])
    filled = sum(" ▁▂▃▄▅▆▇█".index(b[column(f0)]) for b in bars)  # eighths of a row
    assert top - len(bars) * SPECTRUM_DB_ROW + filled / 8 * SPECTRUM_DB_ROW == pytest.approx(-20.0, abs=SPECTRUM_DB_ROW / 8)


def test_no_reading_comes_before_its_audio_was_recorded():
    # a stream hands over a block once its last frame is recorded: the virtual bench paced to the clock
    # likewise, so a reading at t_s seconds of the input arrives no sooner than t_s after the start
    bench = virtual_bench("ideal", {}, seed=1)
    tone = SteadyTone(997.0, DRIVE, bench.sample_rate_hz, None)
    w = Watch(bench, tone).start()
    early = []
    for r in w.readings():
        if r is None:
            continue
        early.append(time.monotonic() - (tone.started_at + r.t_s))
        if len(early) == 8:
            w.stop("done")
    w.join()
    assert min(early) > -0.002


def test_a_turned_stage_parameter_is_checked_and_a_refused_turn_changes_nothing():
    from benchkit.errors import BenchkitError

    bench = virtual_bench("se-class-a", {"bias": 0.8}, seed=1)
    assert bench.stage.turn("bias", 0.85) == 0.85 and bench.stage.params["bias"] == 0.85
    with pytest.raises(BenchkitError, match="bias must be positive"):
        bench.stage.turn("bias", 0.0)
    assert bench.stage.params["bias"] == 0.85
