"""Hostile and malformed input, command by command, as a demanding user would try it.

The contract every command keeps (README, ``tracevet.cli.main``): bad input or
usage exits 2 with exactly one line on stderr naming the file or option and the
problem; no traceback, no "internal error"; nothing written or changed; text a
person typed or a file carried is echoed inert (no raw ESC, C1 controls or bidi
overrides reach the terminal).
"""

from __future__ import annotations

import hashlib
import json
import os
import re
from pathlib import Path

import numpy as np
import pytest

from tracevet.recording import Recording, write_recording

FS = 250.0

# Raw ESC, C1 controls and bidirectional overrides/isolates must never be printed.
_UNSAFE_OUTPUT = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")

HOSTILE_TEXT = "x\x1b[31mRED\x1b[0m \x9b2J [bold red]loud[/] \u202eevil\u202c \x07"


def _tree(root: Path) -> dict[str, tuple[str, int]]:
    """Every file and folder under ``root`` with its SHA-256 and mode.

    Empty lock files (``.lock``, ``.clean.lock``) are left out: a queue makes
    them the first time a command takes its lock, before it looks at the input.
    """
    out = {}
    for path in sorted(root.rglob("*")):
        rel = str(path.relative_to(root))
        if path.name.endswith(".lock") and path.is_file() and path.stat().st_size == 0:
            continue
        if path.is_dir():
            out[rel] = ("dir", path.stat().st_mode)
        else:
            out[rel] = (hashlib.sha256(path.read_bytes()).hexdigest(), path.stat().st_mode)
    return out


def assert_clean_output(*texts: str) -> None:
    """No raw escape, C1 control or bidi override in anything printed."""
    for text in texts:
        bad = _UNSAFE_OUTPUT.findall(text)
        assert not bad, f"raw control characters {bad!r} printed in {text[:300]!r}"


def refused(run_cli, root: Path, *args, mention: str | None = None, code: int = 2) -> str:
    """Run the CLI, expect a one-line refusal and no change under ``root``; return stderr."""
    before = _tree(root)
    rc, out, err = run_cli(*args)
    after = _tree(root)
    assert rc == code, f"exit {rc}, stdout={out!r}, stderr={err!r}"
    assert out == "", f"stdout should be empty on error: {out!r}"
    lines = err.splitlines()
    assert len(lines) == 1, f"expected one line on stderr, got {err!r}"
    assert "Traceback" not in err and "internal error" not in err, err
    if mention is not None:
        assert mention in err, f"{mention!r} not named in {err!r}"
    assert before == after, "files changed by a refused command"
    assert_clean_output(out, err)
    return err


def denoise_refused(run_cli, work: Path, source, *options, mention: str | None = None) -> str:
    """``tracevet denoise SOURCE out.npz OPTIONS`` (files in ``work``) refused in one line; return stderr."""
    return refused(run_cli, work.parent, "denoise", work / source, work / "out.npz", *options, mention=mention)


def _ecg(seconds: float = 8.0, fs: float = FS, scale: float = 1.0, seed: int = 0) -> np.ndarray:
    """A short synthetic ECG in mV (McSharry et al. 2003 model), test input only."""
    from tracevet.synthetic import synthetic_ecg

    return synthetic_ecg(duration_s=seconds, fs=fs, seed=seed).signal * scale


@pytest.fixture
def work(tmp_path):
    """A folder with good and bad input files; returns its path."""
    d = tmp_path / "in"
    d.mkdir()
    sig = _ecg()
    write_recording(Recording(sig.astype(np.float32), FS, ("ECG",), "mV", "ecg"), d / "good.npz")
    np.save(d / "good.npy", sig.astype(np.float32))
    write_recording(Recording(sig[:1000].astype(np.float32), FS, ("ECG",), "mV", "ecg"), d / "short.npz")
    write_recording(Recording(sig.astype(np.float32), 500.0, ("ECG",), "mV", "ecg"), d / "rate500.npz")
    write_recording(
        Recording(np.column_stack([sig, sig]).astype(np.float32), FS, ("a", "b"), "mV", "ecg"), d / "two.npz"
    )
    write_recording(Recording((sig * 1000).astype(np.float32), FS, ("ECG",), "uV", "ecg"), d / "microvolt.npz")
    write_recording(Recording(sig.astype(np.float32), FS, ("MCG",), "pT", "mcg"), d / "mcg.npz")
    (d / "empty.csv").write_text("")
    (d / "header.csv").write_text("time,ecg\n")
    (d / "ragged.csv").write_text("time,ecg\n0,1\n0.004\n0.008,3\n")
    (d / "text.csv").write_text("time,ecg\n0,1\n0.004,abc\n0.008,3\n")
    rows = "\n".join(f"{i / FS:.6f},{v:.4f}" for i, v in enumerate(sig[:500]))
    (d / "nan.csv").write_text("time,ecg\n" + rows + "\n2.0,nan\n")
    (d / "inf.csv").write_text("time,ecg\n" + rows + "\n2.0,inf\n")
    times = np.arange(500) / FS
    times[250:] += 0.5
    (d / "gap.csv").write_text("time,ecg\n" + "\n".join(f"{t:.6f},{v:.4f}" for t, v in zip(times, sig[:500])) + "\n")
    (d / "binary.csv").write_bytes(b"\xff\xfe\x00\x01garbage")
    np.save(d / "strings.npy", np.array(["a", "b", "c"] * 100))
    np.save(d / "complex.npy", (sig + 1j * sig).astype(np.complex64))
    np.save(d / "bool.npy", sig > 0)
    np.save(d / "cube.npy", np.zeros((100, 2, 2), dtype=np.float32))
    np.save(d / "zero.npy", np.zeros(0, dtype=np.float32))
    np.save(d / "nocols.npy", np.zeros((100, 0), dtype=np.float32))
    np.save(d / "object.npy", np.array([1, "a", None] * 100, dtype=object), allow_pickle=True)
    np.save(d / "nan.npy", np.where(np.arange(sig.size) == 700, np.nan, sig))
    (d / "junk.npy").write_bytes(b"\x93NUMPY junk")
    np.savez(d / "nosignal.npz", fs=np.float64(FS))
    np.savez(d / "badfs.npz", signal=sig, fs=np.float64(np.nan))
    np.savez(d / "negfs.npz", signal=sig, fs=np.float64(-250))
    np.savez(d / "strfs.npz", signal=sig, fs=np.array("fast"))
    np.savez(d / "objsig.npz", signal=np.array([1, "a"] * 100, dtype=object))
    (d / "folder.npz").mkdir()
    (d / "unsafe.yaml").write_text("rule: !!python/object/apply:os.system ['echo pwned > pwned.txt']\n")
    (d / "dup.yaml").write_text("rule: sure\nrule: minimax\n")
    (d / "notmap.yaml").write_text("- a\n- b\n")
    (d / "badkey.yaml").write_text("wavelets: db4\n")
    (d / "broken.yaml").write_text("rule: [sure\n")
    # EDF: a valid one written by tracevet, then damaged copies.
    write_recording(Recording(sig.astype(np.float32), FS, ("ECG",), "mV", "ecg"), d / "good.edf")
    data = (d / "good.edf").read_bytes()
    (d / "truncated.edf").write_bytes(data[: len(data) // 2])
    (d / "header-cut.edf").write_bytes(data[:100])
    corrupt = bytearray(data)
    corrupt[236:244] = b"abcdefgh"  # number of data records: not a number
    (d / "corrupt.edf").write_bytes(bytes(corrupt))
    zero = bytearray(data[:256])
    zero[184:192] = b"256     "
    zero[252:256] = b"0   "
    (d / "nosignals.edf").write_bytes(bytes(zero))
    (d / "random.edf").write_bytes(os.urandom(2000))
    return d


# ---------------------------------------------------------------- denoise

BAD_DENOISE_INPUTS = [
    ("empty.csv", []),
    ("header.csv", []),
    ("ragged.csv", []),
    ("text.csv", []),
    ("nan.csv", []),
    ("inf.csv", []),
    ("gap.csv", []),
    ("binary.csv", []),
    ("strings.npy", ["--fs", "250"]),
    ("complex.npy", ["--fs", "250"]),
    ("bool.npy", ["--fs", "250"]),
    ("cube.npy", ["--fs", "250"]),
    ("zero.npy", ["--fs", "250"]),
    ("nocols.npy", ["--fs", "250"]),
    ("object.npy", ["--fs", "250"]),
    ("nan.npy", ["--fs", "250"]),
    ("junk.npy", ["--fs", "250"]),
    ("good.npy", []),
    ("nosignal.npz", []),
    ("badfs.npz", []),
    ("negfs.npz", []),
    ("strfs.npz", []),
    ("objsig.npz", []),
    ("folder.npz", []),
    ("missing.npz", []),
    ("truncated.edf", []),
    ("header-cut.edf", []),
    ("corrupt.edf", []),
    ("nosignals.edf", []),
    ("random.edf", []),
]


@pytest.mark.parametrize("name,extra", BAD_DENOISE_INPUTS, ids=[n for n, _ in BAD_DENOISE_INPUTS])
def test_denoise_refuses_bad_input_file(run_cli, work, name, extra):
    denoise_refused(run_cli, work, name, *extra, mention=name)


@pytest.mark.parametrize("fs", ["nan", "inf", "-inf", "0", "-250", "abc", "1e400", "", "0x10"])
def test_denoise_refuses_bad_fs(run_cli, work, fs):
    denoise_refused(run_cli, work, "good.npy", "--fs", fs, mention="fs")


@pytest.mark.parametrize("fs", ["1e300", "1e-9", "0.001"])
def test_denoise_extreme_fs_is_refused_or_cleaned(run_cli, work, fs):
    """A huge or tiny rate: a one-line refusal, or a written result; never a crash."""
    rc, out, err = run_cli("denoise", work / "good.npy", work / "out.npy", "--fs", fs)
    assert rc in (0, 2), err
    assert "Traceback" not in err and "internal error" not in err
    if rc == 2:
        assert len(err.splitlines()) == 1 and not (work / "out.npy").exists()
    else:
        assert np.isfinite(np.load(work / "out.npy")).all()


@pytest.mark.parametrize(
    "setting,mention",
    [
        ("level", "level"),
        ("level=", "level"),
        ("=5", "--set"),
        ("wavelet=nosuch", "wavelet"),
        ("wavelet=cmor1.5-1.0", "wavelet"),
        ("rule=magic", "rule"),
        ("threshold_mode=medium", "threshold_mode"),
        ("transform=fft", "transform"),
        ("extension=nosuch", "extension"),
        ("level=0", "level"),
        ("level=-3", "level"),
        ("level=2.5", "level"),
        ("level=nan", "level"),
        ("level=40", "level"),
        ("baseline_cutoff_hz=nan", "baseline_cutoff_hz"),
        ("baseline_cutoff_hz=-1", "baseline_cutoff_hz"),
        ("mains=55", "mains"),
        ("mains_harmonics=0", "mains_harmonics"),
        ("mains_harmonics=1e9", "mains_harmonics"),
        ("nosuchkey=1", "nosuchkey"),
        ("rule=!!python/object/apply:os.system ['true']", "rule"),
        ("wavelet=\x1b[31mdb4", "wavelet"),
    ],
)
def test_denoise_refuses_bad_setting(run_cli, work, setting, mention):
    denoise_refused(run_cli, work, "good.npz", "--set", setting, mention=mention)


def test_denoise_level_too_deep_for_signal(run_cli, work):
    denoise_refused(run_cli, work, "short.npz", "--set", "level=12", mention="level")


@pytest.mark.parametrize(
    "profile", ["unsafe.yaml", "dup.yaml", "notmap.yaml", "badkey.yaml", "broken.yaml", "missing.yaml", "folder.npz"]
)
def test_denoise_refuses_bad_profile(run_cli, work, profile):
    denoise_refused(run_cli, work, "good.npz", "--profile", work / profile, mention=profile)
    assert not (work / "pwned.txt").exists() and not Path("pwned.txt").exists()


def test_denoise_refuses_output_onto_input(run_cli, work):
    err = refused(run_cli, work.parent, "denoise", work / "good.npz", work / "good.npz", mention="good.npz")
    assert "same" in err or "input" in err


def test_denoise_refuses_output_onto_input_by_another_path(run_cli, work):
    other = work / "sub"
    other.mkdir()
    refused(run_cli, work.parent, "denoise", work / "good.npz", other / ".." / "good.npz")


def test_denoise_refuses_output_into_missing_folder(run_cli, work):
    refused(run_cli, work.parent, "denoise", work / "good.npz", work / "nowhere" / "out.npz", mention="out.npz")


def test_denoise_refuses_output_folder_and_unknown_extension(run_cli, work):
    refused(run_cli, work.parent, "denoise", work / "good.npz", work / "folder.npz", mention="folder.npz")
    refused(run_cli, work.parent, "denoise", work / "good.npz", work / "out.wav", mention="out.wav")
    refused(run_cli, work.parent, "denoise", work / "good.npz", work / "out", mention="out")


def test_denoise_refuses_missing_arguments(run_cli, work):
    refused(run_cli, work.parent, "denoise")
    refused(run_cli, work.parent, "denoise", work / "good.npz")
    refused(run_cli, work.parent, "denoise", work / "good.npz", work / "o.npz", "--kind", "eeg", mention="kind")
    refused(run_cli, work.parent, "denoise", work / "good.npz", work / "o.npz", "--units", "\x1b[2J", mention="units")
    refused(run_cli, work.parent, "denoise", work / "good.npz", work / "o.npz", "--nosuch")


def test_denoise_unreadable_file(run_cli, work):
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        pytest.skip("running as root: file permissions do not stop reading")
    target = work / "locked.npz"
    target.write_bytes((work / "good.npz").read_bytes())
    target.chmod(0)
    try:
        refused(run_cli, work.parent, "denoise", target, work / "out.npz", mention="locked.npz")
    finally:
        target.chmod(0o644)


def test_denoise_hostile_file_name_is_echoed_inert(run_cli, work):
    name = "a\x1b]0;title\x07[red]b[blink]\u202ec.csv"
    (work / name).write_text("")
    err = denoise_refused(run_cli, work, name)
    assert "\\x1b" in err


def test_denoise_flat_and_noise_signals_are_cleaned(run_cli, work):
    """Flat line and pure noise are valid recordings: cleaned, finite, no crash."""
    np.save(work / "flat.npy", np.zeros(5000, dtype=np.float32))
    np.save(work / "const.npy", np.full(5000, 3.0, dtype=np.float32))
    np.save(work / "noise.npy", np.random.default_rng(1).standard_normal(5000).astype(np.float32))
    for name in ("flat", "const", "noise"):
        rc, out, err = run_cli("denoise", work / f"{name}.npy", work / f"{name}-out.npy", "--fs", "250")
        assert rc == 0, err
        assert np.isfinite(np.load(work / f"{name}-out.npy")).all()


@pytest.mark.parametrize("scale,units,kind", [(1e-3, "fT", "mcg"), (1e3, "uV", "ecg"), (1e-12, "other", "other")])
def test_denoise_extreme_scales(run_cli, work, scale, units, kind):
    sig = _ecg() * scale
    write_recording(Recording(sig, FS, ("s",), None if units == "other" else units, kind), work / "scaled.npz")
    rc, out, err = run_cli("denoise", work / "scaled.npz", work / "scaled-out.npz")
    assert rc == 0, err
    cleaned = np.load(work / "scaled-out.npz")["signal"]
    assert np.isfinite(cleaned).all()
    # The cleaned trace keeps the scale of the input (R peaks survive), whatever the units.
    assert 0.5 < np.ptp(cleaned) / np.ptp(sig) < 1.5


# ---------------------------------------------------------------- assess


def assess_refused(run_cli, work: Path, original: str, cleaned: str, *options, mention: str | None = None) -> str:
    """``tracevet assess ORIGINAL CLEANED OPTIONS`` (files in ``work``) refused in one line; return stderr."""
    return refused(run_cli, work.parent, "assess", work / original, work / cleaned, *options, mention=mention)


def test_assess_refuses_mismatched_pairs(run_cli, work):
    assess_refused(run_cli, work, "good.npz", "short.npz")
    assess_refused(run_cli, work, "good.npz", "rate500.npz")
    assess_refused(run_cli, work, "good.npz", "two.npz")
    assess_refused(run_cli, work, "good.npz", "nan.npy", "--fs", "250", mention="nan.npy")
    assess_refused(run_cli, work, "truncated.edf", "good.npz", mention="truncated.edf")
    assess_refused(run_cli, work, "good.npz", "good.npz", "--limits", work / "unsafe.yaml", mention="unsafe.yaml")
    assess_refused(run_cli, work, "good.npz", "good.npz", "--limits", work / "notmap.yaml", mention="notmap.yaml")
    assess_refused(run_cli, work, "good.npz", "good.npz", "--fs", "nan", mention="fs")
    assess_refused(run_cli, work, "good.npz", "good.npz", "--save", work / "nowhere" / "deeper", mention="nowhere")
    err = assess_refused(run_cli, work, "good.npz", "good.npz", "--save", work / "good.npy", mention="good.npy")
    assert "not a folder" in err


@pytest.mark.parametrize("signal", ["flat", "noise"])
def test_assess_no_beats_is_a_clear_outcome(run_cli, work, signal):
    rng = np.random.default_rng(3)
    sig = np.zeros(5000) if signal == "flat" else rng.standard_normal(5000)
    write_recording(Recording(sig, FS, ("ECG",), "mV", "ecg"), work / "x.npz")
    rc, out, err = run_cli("assess", work / "x.npz", work / "x.npz", "--json")
    assert rc in (0, 1), err
    assert "Traceback" not in err and "internal error" not in err
    result = json.loads(out)
    if signal == "flat":
        assert any(f["id"] == "no-beats" for f in result["flags"])
    rc, out, err = run_cli("assess", work / "x.npz", work / "x.npz")
    assert rc in (0, 1) and out.strip() and "Traceback" not in err


@pytest.mark.parametrize("scale,units,kind", [(1e-3, "fT", "mcg"), (1e3, "uV", "ecg")])
def test_assess_extreme_scales(run_cli, work, scale, units, kind):
    sig = _ecg() * scale
    write_recording(Recording(sig, FS, ("s",), units, kind), work / "o.npz")
    rc, out, err = run_cli("denoise", work / "o.npz", work / "c.npz")
    assert rc == 0, err
    rc, out, err = run_cli("assess", work / "o.npz", work / "c.npz", "--json")
    assert rc in (0, 1), err
    result = json.loads(out)
    assert not any(f["id"] == "no-beats" for f in result["flags"]), result["flags"]
    assert all(v is None or np.isfinite(v) for v in result["metrics"].values() if not isinstance(v, (str, dict, list)))


def test_assess_hostile_channel_names_inert(run_cli, work):
    sig = _ecg()
    write_recording(Recording(sig, FS, (HOSTILE_TEXT,), HOSTILE_TEXT[:0] or "mV", "ecg"), work / "h.npz")
    rc, out, err = run_cli("assess", work / "h.npz", work / "h.npz")
    assert rc in (0, 1), err
    assert_clean_output(out, err)


# ---------------------------------------------------------------- queue


@pytest.fixture
def queue(tmp_path, run_cli):
    q = tmp_path / "q"
    rc, out, err = run_cli("init", q)
    assert rc == 0, err
    return q


def added_record(run_cli, queue: Path, work: Path, clean: bool = False) -> str:
    """Add ``good.npz`` to the queue with the CLI (and clean it, if asked); return its record id."""
    rc, out, err = run_cli("add", queue, work / "good.npz")
    assert rc == 0, err
    if clean:
        rc, out, err = run_cli("clean", queue, "--quiet", "--workers", "1")
        assert rc in (0, 1), err
    return next((queue / "records").iterdir()).name


def test_queue_commands_refuse_non_queue(run_cli, work):
    plain = work.parent / "plain"
    plain.mkdir()
    (plain / "stuff.txt").write_text("not a queue")
    for target in (plain, work / "good.npz", work.parent / "missing"):
        for args in (
            ("status", target),
            ("status", target, "--json"),
            ("log", target),
            ("log", target, "--verify"),
            ("clean", target, "--quiet"),
            ("add", target, work / "good.npz"),
            ("decide", target, "rec", "accept"),
            ("claim", target, "rec"),
            ("release", target, "rec"),
            ("export", target, work.parent / "dest"),
        ):
            refused(run_cli, work.parent, *args)


def test_init_refuses_bad_places(run_cli, work):
    refused(run_cli, work.parent, "init", work / "good.npz", mention="good.npz")
    refused(run_cli, work.parent, "init", work, mention="in")  # a folder with files in it
    refused(run_cli, work.parent, "init", work.parent / "nowhere" / "q")
    refused(run_cli, work.parent, "init", work.parent / "q2", "--profile", work / "unsafe.yaml", mention="unsafe.yaml")
    refused(run_cli, work.parent, "init", work.parent / "q2", "--set", "rule=magic", mention="rule")
    refused(run_cli, work.parent, "init", work.parent / "q2", "--set", "level", mention="level")
    refused(run_cli, work.parent, "init", work.parent / "q2", "--kind", "eeg", mention="kind")
    refused(run_cli, work.parent, "init", work.parent / "q2", "--claim-idle-minutes", "nan")
    refused(run_cli, work.parent, "init", work.parent / "q2", "--claim-idle-minutes", "-5")


def test_unsafe_queue_yaml_is_refused(run_cli, queue, work):
    settings = queue / "queue.yaml"
    settings.write_text(settings.read_text() + "\nextra: !!python/object/apply:os.system ['echo pwned > pwned.txt']\n")
    for args in (("status", queue), ("add", queue, work / "good.npz"), ("clean", queue, "--quiet"), ("log", queue)):
        refused(run_cli, queue.parent, *args, mention="queue.yaml")
    assert not (queue / "pwned.txt").exists()


def test_garbled_queue_yaml_is_refused(run_cli, queue, work):
    (queue / "queue.yaml").write_text("[unclosed\n")
    refused(run_cli, queue.parent, "status", queue, mention="queue.yaml")
    (queue / "queue.yaml").write_text("- a list\n")
    refused(run_cli, queue.parent, "status", queue, mention="queue.yaml")


def test_add_refuses_bad_files_and_writes_nothing(run_cli, queue, work):
    for name, extra in BAD_DENOISE_INPUTS:
        refused(run_cli, queue.parent, "add", queue, work / name, *extra, mention=name)
    # one bad file among good ones: nothing added at all
    refused(run_cli, queue.parent, "add", queue, work / "good.npz", work / "nan.csv", mention="nan.csv")
    refused(run_cli, queue.parent, "add", queue, work / "good.npz", "--kind", "eeg", mention="kind")
    refused(run_cli, queue.parent, "add", queue, work / "good.npy", "--fs", "nan", mention="fs")
    refused(run_cli, queue.parent, "add", queue)  # nothing to add
    refused(run_cli, queue.parent, "add", queue, queue, mention="q")  # the queue into itself


@pytest.mark.parametrize(
    "other", ["short.npz", "rate500.npz", "two.npz", "nan.csv", "truncated.edf", "microvolt.npz", "mcg.npz"]
)
def test_add_pair_refuses_mismatch(run_cli, queue, work, other):
    """The pairs 'tracevet assess' refuses (length, rate, channels, units) are refused by add --pair too."""
    refused(run_cli, queue.parent, "add", queue, "--pair", work / "good.npz", work / other, mention=other)
    if other in ("microvolt.npz", "mcg.npz"):
        refused(run_cli, queue.parent, "assess", work / "good.npz", work / other, mention=other)


def test_add_pair_refuses_same_file_twice_or_with_files(run_cli, queue, work):
    refused(run_cli, queue.parent, "add", queue, "--pair", work / "good.npz", work / "good.npz", work / "short.npz")


HOSTILE_NAMES = [
    "..%2f..%2fetc.csv",
    "../escape.npz",
    "\x1b[2Jclear.npz",
    "[bold red]loud[reverse].npz",
    "\u202eevil\u202c.npz",
    "a" * 240 + ".npz",
    "con.npz",
    "...npz",
    "-rf.npz",
    "\u00fcml\u00e4ut.npz",
    "tab\there.npz",
    "new\nline.npz",
]


def test_add_hostile_names_safe_ids_and_inert_display(run_cli, queue, work, tmp_path):
    src = tmp_path / "names"
    src.mkdir()
    (src / "deep").mkdir()
    good = (work / "good.npz").read_bytes()
    paths = []
    for i, name in enumerate(HOSTILE_NAMES):
        name = name.replace("../", "")
        target = src / "deep" / name
        # distinct bytes so the duplicate check does not refuse them
        sig = _ecg(seed=i)
        write_recording(Recording(sig, FS, (HOSTILE_TEXT,), "mV", "ecg"), target)
        paths.append(target)
    escape = src / "deep" / ".." / "escape.npz"
    write_recording(Recording(_ecg(seed=99), FS, ("ECG",), "mV", "ecg"), escape)
    paths.append(escape)
    # the same file name from two folders: both added, ids unique
    (src / "other").mkdir()
    write_recording(Recording(_ecg(seed=50), FS, ("ECG",), "mV", "ecg"), src / "other" / "con.npz")
    paths.append(src / "other" / "con.npz")
    before_outside = _tree(work)
    rc, out, err = run_cli("add", queue, *paths)
    assert rc == 0, err
    assert_clean_output(out, err)
    assert _tree(work) == before_outside and good == (work / "good.npz").read_bytes()
    # every file the queue made is inside it, with a safe short name
    for path in queue.rglob("*"):
        assert path.resolve().is_relative_to(queue.resolve())
        assert len(path.name) <= 100 and "\x1b" not in path.name and "\n" not in path.name
    assert not (tmp_path / "escape").exists()
    rc, out, err = run_cli("status", queue, "--list")
    assert rc == 0, err
    assert_clean_output(out, err)
    rc, out, err = run_cli("status", queue, "--json")
    assert rc == 0, err
    data = json.loads(out)  # JSON escapes controls itself; it must still parse
    assert data
    ids = [p.name for p in (queue / "records").iterdir()] if (queue / "records").exists() else []
    assert len(set(i.casefold() for i in ids)) == len(ids) == len(paths)


@pytest.mark.parametrize(
    "record",
    ["../q", "/etc/passwd", "..", ".", "", "a/b", "\x1b[31mx", "[b]x[/b]", "a" * 300, "con", "rec\n"],
)
def test_record_id_arguments_refused(run_cli, queue, record):
    for args in (
        ("decide", queue, record, "accept"),
        ("claim", queue, record),
        ("release", queue, record),
        ("log", queue, "--record", record),
    ):
        refused(run_cli, queue.parent, *args)


def test_decide_refuses_bad_runs_and_settings(run_cli, queue, work):
    rc, out, err = run_cli("add", queue, work / "good.npz")
    assert rc == 0, err
    record = next((queue / "records").iterdir()).name if (queue / "records").exists() else "good"

    def decide_refused(*args, mention=None):
        refused(run_cli, queue.parent, "decide", queue, record, *args, mention=mention)

    decide_refused("accept", "--run", "../run-001")
    decide_refused("accept", "--run", "run-999")
    decide_refused("rerun", "--set", "rule=magic", mention="rule")
    decide_refused("rerun", "--set", "rule", mention="rule")
    decide_refused("rerun", "--profile", work / "unsafe.yaml", mention="unsafe.yaml")
    decide_refused("reject")  # no note
    decide_refused("maybe")


def test_clean_refuses_bad_options(run_cli, queue):
    refused(run_cli, queue.parent, "clean", queue, "--workers", "0")
    refused(run_cli, queue.parent, "clean", queue, "--workers", "-1")
    refused(run_cli, queue.parent, "clean", queue, "--set", "rule=magic", mention="rule")
    refused(run_cli, queue.parent, "clean", queue, "--set", "noequals", mention="noequals")


def test_notes_stored_as_given_and_shown_inert(run_cli, queue, work, tmp_path):
    record = added_record(run_cli, queue, work, clean=True)
    note = HOSTILE_TEXT + "\nsecond line"
    reviewer = "rev\x1b[1m[i]x[/i]"
    rc, out, err = run_cli("decide", queue, record, "accept", "--note", note, "--reviewer", reviewer)
    assert rc == 0, err
    assert_clean_output(out, err)
    log_text = (queue / "decisions.jsonl").read_text(encoding="utf-8")
    entries = [json.loads(line) for line in log_text.splitlines() if line.strip()]
    assert any(e.get("note") == note for e in entries), "note not stored as given"
    for args in (
        ("log", queue),
        ("log", queue, "--record", record),
        ("status", queue),
        ("status", queue, "--list"),
        ("log", queue, "--verify"),
    ):
        rc, out, err = run_cli(*args)
        assert rc == 0, (args, err)
        assert_clean_output(out, err)
    rc, out, err = run_cli("log", queue, "--json")
    assert rc == 0, err
    assert "\x1b" not in out and "\\u001b" in out  # JSON escapes the control characters
    dest = tmp_path / "export"
    rc, out, err = run_cli("export", queue, dest)
    assert rc == 0, err
    assert_clean_output(out, err)
    for path in dest.rglob("*"):
        if path.suffix in {".txt", ".csv"}:
            assert_clean_output(path.read_text(encoding="utf-8"))
    # exporting again onto the existing destination is refused and changes nothing
    refused(run_cli, tmp_path, "export", queue, dest, mention="export")
    refused(run_cli, tmp_path, "export", queue, queue, mention="q")


# ---------------------------------------------------------------- review, demo, top level


def test_review_and_demo_refuse_bad_places(run_cli, work):
    refused(run_cli, work.parent, "review", work / "good.npz", mention="good.npz")
    plain = work.parent / "plain"
    plain.mkdir()
    refused(run_cli, work.parent, "review", plain, mention="plain")
    refused(run_cli, work.parent, "demo", work, mention="in")  # not empty
    refused(run_cli, work.parent, "demo", work / "good.npz", mention="good.npz")
    refused(run_cli, work.parent, "demo", work.parent / "nowhere" / "deep")


def test_top_level_usage_errors(run_cli, tmp_path):
    refused(run_cli, tmp_path, "nosuchcommand")
    refused(run_cli, tmp_path, "\x1b[31mred")
    refused(run_cli, tmp_path, "--nosuch")


def test_every_command_has_help(run_cli):
    rc, out, err = run_cli("--help")
    assert rc == 0
    commands = re.findall(r"^    (\w+)\s{2,}", out, re.M)
    assert {"denoise", "assess", "init", "add", "clean", "status", "decide", "log", "export", "review", "demo"} <= set(
        commands
    )
    for command in commands:
        rc, out_c, err_c = run_cli(command, "--help")
        assert rc == 0 and "usage:" in out_c and err_c == "", command


def test_real_process_exit_codes(run_cli_process, tmp_path):
    """python -m tracevet: real exit codes, the error on stderr only, nothing on stdout."""
    (tmp_path / "empty.csv").write_text("")
    rc, out, err = run_cli_process("denoise", tmp_path / "empty.csv", tmp_path / "o.npz")
    assert (rc, out) == (2, "") and len(err.splitlines()) == 1 and "empty.csv" in err
    rc, out, err = run_cli_process("status", tmp_path)
    assert (rc, out) == (2, "") and len(err.splitlines()) == 1
    rc, out, err = run_cli_process("assess", tmp_path / "missing.npz", tmp_path / "missing.npz", "--json")
    assert (rc, out) == (2, "") and len(err.splitlines()) == 1 and "missing.npz" in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["empty.csv"]


def test_written_files_are_readable_by_the_team(run_cli, work, tmp_path):
    """Atomic writes give files the usual permissions (umask), not mkstemp's private 0600."""
    umask = os.umask(0o022)
    try:
        rc, out, err = run_cli("denoise", work / "good.npz", work / "shared.csv")
        assert rc == 0, err
        rc, out, err = run_cli("init", tmp_path / "team-q")
        assert rc == 0, err
    finally:
        os.umask(umask)
    assert (work / "shared.csv").stat().st_mode & 0o777 == 0o644
    assert (tmp_path / "team-q" / "queue.yaml").stat().st_mode & 0o777 == 0o644


def test_csv_errors_name_the_line_of_the_file(run_cli, work):
    err = denoise_refused(run_cli, work, "text.csv")
    assert "line 3" in err  # 'abc' is on the third line of the file
    err = denoise_refused(run_cli, work, "ragged.csv")
    assert "line 3" in err and "usecols" not in err
    err = denoise_refused(run_cli, work, "nosignals.edf")
    assert "no signals" in err


def test_export_refuses_a_tampered_log(run_cli, queue, work, tmp_path):
    """A sign-off whose log entry was edited (note, reviewer) is never exported as if valid."""
    record = added_record(run_cli, queue, work, clean=True)
    rc, out, err = run_cli("decide", queue, record, "accept", "--note", "fine", "--reviewer", "ana")
    assert rc == 0, err
    log = queue / "decisions.jsonl"
    lines = log.read_text(encoding="utf-8").splitlines()
    entry = json.loads(lines[-1])
    entry["reviewer"] = "\x1b[32mchief\x1b[0m"
    lines[-1] = json.dumps(entry)
    log.write_text("\n".join(lines) + "\n", encoding="utf-8")
    err = refused(run_cli, tmp_path, "export", queue, tmp_path / "out", mention="decisions.jsonl")
    assert "changed" in err and not (tmp_path / "out").exists()


@pytest.mark.parametrize(
    "name,content", [("garbage.npz", b"garbage"), ("garbage.npy", b"garbage"), ("empty.npz", b""), ("empty.npy", b"")]
)
def test_numpy_files_that_are_not_numpy_say_so(run_cli, work, name, content):
    """Not numpy's guess that the bytes are a pickle, but what is wrong."""
    (work / name).write_bytes(content)
    err = denoise_refused(run_cli, work, name, "--fs", "250", mention=name)
    assert "pickle" not in err and ("not a NumPy" in err or "empty" in err)


def test_numpy_header_declaring_a_huge_array(run_cli, work):
    """A forged .npy header (shape of 10^13 samples) is refused, not a MemoryError."""
    import io

    buffer = io.BytesIO()
    np.save(buffer, np.zeros(10, dtype="<f8"))
    data = buffer.getvalue()
    header = data[:128].decode("latin1").replace("(10,)", "(10000000000000,)")
    header = header[:-1].ljust(127) + "\n"
    (work / "bomb.npy").write_bytes(header.encode("latin1") + data[128:])
    denoise_refused(run_cli, work, "bomb.npy", "--fs", "250", mention="bomb.npy")


def test_edf_header_stays_printable_ascii_and_nan_ranges_refused(run_cli, work):
    """EDF header fields hold printable US-ASCII, bytes 32..126.

    Source: EDF+ specification, Kemp & Olivan 2003 (from memory).
    """
    write_recording(Recording(_ecg(), FS, (HOSTILE_TEXT,), "mV", "ecg"), work / "hostile.edf")
    header = (work / "hostile.edf").read_bytes()[:512]
    assert all(32 <= b <= 126 for b in header)
    data = bytearray((work / "good.edf").read_bytes())
    data[256 + 104 : 256 + 112] = b"nan     "  # physical minimum of the one signal
    (work / "pnan.edf").write_bytes(bytes(data))
    err = denoise_refused(run_cli, work, "pnan.edf", mention="pnan.edf")
    assert "physical minimum" in err


@pytest.mark.parametrize("scale,dtype", [(1e25, np.float32), (1e200, np.float64)])
def test_absurdly_large_values_refused_not_overflowed(run_cli, work, scale, dtype):
    """Values whose squares overflow are refused up front, never cleaned into NaN."""
    np.savez(
        work / "huge.npz",
        signal=(_ecg() * scale).astype(dtype),
        fs=np.float64(FS),
        units=np.array("mV"),
        kind=np.array("ecg"),
    )
    err = denoise_refused(run_cli, work, "huge.npz", mention="huge.npz")
    assert "units" in err
    assess_refused(run_cli, work, "huge.npz", "huge.npz", mention="huge.npz")


def test_hand_edited_claim_file_shown_inert(run_cli, queue, work):
    """Every field of a claim file edited by hand (host, since, reviewer) reaches the terminal inert."""
    record = added_record(run_cli, queue, work)
    rc, out, err = run_cli("claim", queue, record, "--reviewer", "ana")
    assert rc == 0, err
    claim_file = next((queue / "claims").glob("*.json"))
    data = json.loads(claim_file.read_text(encoding="utf-8"))
    data.update(host="h\x1b]0;title\x07\u202e", reviewer="r\x9b31m", since="\x1b[2J", last_activity="not a time")
    claim_file.write_text(json.dumps(data), encoding="utf-8")
    for args in (("status", queue), ("status", queue, "--list")):
        rc, out, err = run_cli(*args)
        assert rc == 0, err
        assert_clean_output(out, err)
        assert "\\x1b[2J" in out


def test_duplicate_keys_refused_in_queue_settings_and_limits(run_cli, queue, work):
    """A key given twice would silently override the first (PyYAML keeps the last): refused, naming the line."""
    settings = queue / "queue.yaml"
    original = settings.read_text(encoding="utf-8")
    settings.write_text(original + "\ndefaults:\n  kind: mcg\n", encoding="utf-8")
    err = refused(run_cli, queue.parent, "status", queue, mention="queue.yaml")
    assert "duplicate key 'defaults'" in err
    settings.write_text(original, encoding="utf-8")
    (work / "limits.yaml").write_text("flag_limits:\n  r-peak-change: {warn: 0.1, fail: 0.2}\n  r-peak-change: off\n")
    err = assess_refused(run_cli, work, "good.npz", "good.npz", "--limits", work / "limits.yaml", mention="limits.yaml")
    assert "duplicate key 'r-peak-change'" in err and "line 3" in err
    denoise_args = ("denoise", work / "good.npz", work / "out.npz", "--assess", "--limits", work / "limits.yaml")
    refused(run_cli, work.parent, *denoise_args, mention="limits.yaml")


def test_success_output_echoes_hostile_file_names_inert(run_cli, work):
    name = "e\x1b[31mvil\u202e[b]x"
    (work / f"{name}.npz").write_bytes((work / "good.npz").read_bytes())
    rc, out, err = run_cli("denoise", work / f"{name}.npz", work / f"{name}-out.npz")
    assert rc == 0, err
    assert_clean_output(out, err)
    rc, out, err = run_cli("assess", work / f"{name}.npz", work / f"{name}-out.npz")
    assert rc in (0, 1), err
    assert_clean_output(out, err)
    assert "\\x1b[31m" in out
