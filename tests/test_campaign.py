"""The fault campaign as tests: bad problem files and command lines, each with its
exit code and the words its message must hold; damaged run files; a second writer;
a stopped sweep; a closed stdout. None may leave an output folder or a temporary
file behind."""

import json
import os
import pickle
import sys

import numpy as np
import pytest
from test_errors import GOOD

from topo import runfolder
from topo.cli import main

VOID_AT_SUPPORT = '[[passive]]\nkind = "void"\nregion = { box = { min = [0, 0], max = [3, 10] } }\n'
SECOND_CASE = (
    '[[load_case]]\nname = "{}"\n  [[load_case.force]]\n  region = {{ point = [20.0, 0.0] }}\n'
    "  total = [5.0, 0.0]\n"
)
DUPLICATE_SUPPORT = '[[support]]\nname = "{}"\nregion = {{ face = "y-min" }}\n'

# (label, problem file (text or bytes), expected exit code, words of the message)
BAD_FILES = [
    ("binary file", b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR", 2, ["not UTF-8", "byte 0x89"]),
    (
        "latin-1 text",
        GOOD.replace('name = "plate"', 'name = "plate"\ndescription = "Träger"').encode("latin-1"),
        2,
        ["not UTF-8"],
    ),
    ("NUL character", GOOD + "\x00\n", 2, ["TOML syntax error"]),
    (
        "youngs_modulus 1e308",
        GOOD.replace('preset = "AlSi10Mg"', 'preset = "AlSi10Mg"\nyoungs_modulus = 1e308'),
        2,
        ["material.youngs_modulus", "[1, 1.2e6]", "in MPa"],
    ),
    (
        "youngs_modulus 1e-300",
        GOOD.replace('preset = "AlSi10Mg"', 'preset = "AlSi10Mg"\nyoungs_modulus = 1e-300'),
        2,
        ["material.youngs_modulus", "diamond"],
    ),
    (
        "filter_radius 1e9",
        GOOD.replace("max_iterations = 12", "max_iterations = 12\nfilter_radius = 1e9"),
        2,
        ["optimization.filter_radius", "longest side", "grey"],
    ),
    (
        "filter_radius 26 elements",
        GOOD.replace("max_iterations = 12", "max_iterations = 12\nfilter_radius = 13").replace(
            "element_size = 1.0", "element_size = 0.5"
        ),
        2,
        ["optimization.filter_radius", "25 elements"],
    ),
    (
        "load 1e308 N",
        GOOD.replace("total = [0.0, -10.0]", "total = [0.0, -1e308]"),
        2,
        ["load_case[0].force[0].total[1]", "[-1e9, 1e9]", "100,000 tonnes"],
    ),
    (
        "300-character name",
        GOOD.replace('name = "plate"', f'name = "{"p" * 300}"'),
        2,
        ["name", "300 characters", "at most 100"],
    ),
    (
        "name with a newline",
        GOOD.replace('name = "plate"', 'name = "pl\\nate"'),
        2,
        ["name", "control characters"],
    ),
    (
        "load-case name with a newline",
        GOOD.replace('name = "down"', 'name = "do\\nwn"'),
        2,
        ["load_case[0].name", "one line"],
    ),
    (
        "duplicate support names",
        GOOD.replace('region = { face = "x-min" }', 'name = "clamp"\nregion = { face = "x-min" }')
        + DUPLICATE_SUPPORT.format("clamp"),
        2,
        ["support[1].name", "duplicate name 'clamp'"],
    ),
    (
        "duplicate passive names",
        GOOD + '[[passive]]\nname = "boss"\nkind = "solid"\nregion = { box = { min = [5, 2], '
        'max = [7, 4] } }\n[[passive]]\nname = "boss"\nkind = "void"\n'
        "region = { box = { min = [10, 2], max = [12, 4] } }\n",
        2,
        ["passive[1].name", "duplicate name 'boss'"],
    ),
    (
        "load-case names equal in fields.vtu",
        GOOD.replace('name = "down"', 'name = "left arm"') + SECOND_CASE.format("left_arm"),
        2,
        ["load_case[1].name", "as field names"],
    ),
    (
        "support inside a void region",
        GOOD + VOID_AT_SUPPORT,
        2,
        ["support[0].region", "inside a void"],
    ),
    (
        "volume_fraction 1e-9",
        GOOD.replace("volume_fraction = 0.4", "volume_fraction = 1e-9"),
        2,
        ["optimization.volume_fraction", "less than one element"],
    ),
]


def call(argv, capsys):
    try:
        code = main([str(a) for a in argv])
    except SystemExit as exc:  # argparse refuses a bad option this way
        code = exc.code
    return code, capsys.readouterr().err


def write(path, content):
    (path.write_bytes if isinstance(content, bytes) else path.write_text)(content)
    return path


def nothing_left(tmp_path):
    """No output folder and no temporary file was left in the working folder."""
    names = sorted(p.name for p in tmp_path.rglob("*"))
    assert names == ["p.toml"], names


@pytest.mark.parametrize("label,content,code,words", BAD_FILES, ids=[c[0] for c in BAD_FILES])
def test_bad_problem_file(label, content, code, words, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    f = write(tmp_path / "p.toml", content)
    for command in (["check", f], ["run", f], ["run", f, "--out", tmp_path / "a" / "b"]):
        got, err = call(command, capsys)
        assert got == code, err
        assert str(f) in err and all(w in err for w in words), err
        assert "Traceback" not in err and "internal error" not in err
        nothing_left(tmp_path)  # validated before any folder was made, or cleaned away


# (label, command line after `topo` with {f} the problem file, exit code, words);
# {npy}, {file} are prepared below
BAD_COMMANDS = [
    ("--iso nan", ["run", "{f}", "--iso", "nan"], 2, ["--iso", "(0, 1)"]),
    ("--iso 2.0", ["run", "{f}", "--iso", "2.0"], 2, ["--iso", "(0, 1)", "empty"]),
    ("--iso 0", ["run", "{f}", "--iso", "0"], 2, ["--iso", "(0, 1)"]),
    ("--smooth -5", ["run", "{f}", "--smooth", "-5"], 2, ["--smooth", "at least 0"]),
    (
        "--jobs 0",
        ["sweep", "{f}", "--vary", "optimization.penalty=3", "--jobs", "0"],
        2,
        ["--jobs"],
    ),
    ("--design wrong shape", ["analyze", "{f}", "--design", "{shape}"], 2, ["--design", "(3, 3)"]),
    ("--design corrupt", ["analyze", "{f}", "--design", "{corrupt}"], 2, ["--design", "readable"]),
    ("--design pickled", ["analyze", "{f}", "--design", "{pickled}"], 2, ["--design", "readable"]),
    ("--design missing", ["analyze", "{f}", "--design", "{missing}"], 2, ["--design", "no such"]),
    ("--out is a file", ["run", "{f}", "--out", "{file}"], 2, ["--out", "is a file"]),
    ("--out below a file", ["run", "{f}", "--out", "{below}"], 2, ["--out", "below the file"]),
    ("analyze --out a file", ["analyze", "{f}", "--out", "{file}"], 2, ["--out", "is a file"]),
    (
        "sweep --out a file",
        ["sweep", "{f}", "--vary", "optimization.penalty=3", "--out", "{file}"],
        2,
        ["--out", "is a file"],
    ),
    ("file named outputs", ["run", "{f}"], 2, ["outputs", "below the file"]),
    ("resume no folder", ["run", "--resume", "{missing}"], 2, ["--resume", "no such run folder"]),
    ("run without a file", ["run"], 2, ["give a problem file"]),
    ("export no run", ["export", "{empty}"], 2, ["not a finished run"]),
]


@pytest.mark.parametrize("label,argv,code,words", BAD_COMMANDS, ids=[c[0] for c in BAD_COMMANDS])
def test_bad_command_line(label, argv, code, words, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    f = write(tmp_path / "p.toml", GOOD)
    np.save(tmp_path / "shape.npy", np.ones((3, 3)))
    (tmp_path / "corrupt.npy").write_bytes(b"\x93NUMPY\x01\x00garbage")
    (tmp_path / "pickled.npy").write_bytes(pickle.dumps({"a": 1}))
    made = {"p.toml", "shape.npy", "corrupt.npy", "pickled.npy"}
    if label == "file named outputs":
        (tmp_path / "outputs").write_text("a file, not a folder")
        made.add("outputs")
    (tmp_path / "file").write_text("x")
    (tmp_path / "empty").mkdir()
    made |= {"file", "empty"}
    names = {
        "f": f,
        "shape": tmp_path / "shape.npy",
        "corrupt": tmp_path / "corrupt.npy",
        "pickled": tmp_path / "pickled.npy",
        "missing": tmp_path / "missing",
        "file": tmp_path / "file",
        "below": tmp_path / "file" / "run",
        "empty": tmp_path / "empty",
    }
    got, err = call([a.format(**names) for a in argv], capsys)
    assert got == code, err
    assert all(w in err for w in words), err
    assert "Traceback" not in err and "internal error" not in err
    assert {p.name for p in tmp_path.iterdir()} == made
    assert not any((tmp_path / "empty").iterdir())


# ------------------------------------------------------------------ damaged run files


@pytest.fixture(scope="module")
def finished_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("finished")
    f = write(root / "p.toml", GOOD)
    assert main(["run", str(f), "--out", str(root / "run"), "--quiet"]) == 0
    return root / "run"


def damage(path, how):
    data = path.read_bytes()
    if how == "truncated":
        path.write_bytes(data[: len(data) // 2])
    elif how == "empty":
        path.write_bytes(b"")
    elif how == "bit-flipped":
        i = len(data) // 2
        path.write_bytes(data[:i] + bytes([data[i] ^ 0xFF]) + data[i + 1 :])
    elif how == "wrong shape":
        np.save(path, np.ones((2, 2)))
    elif how == "wrong kind":
        path.write_text("[1, 2, 3]")


DAMAGED_RUN = (
    [
        ("density.npy", how, "density.npy")
        for how in ("truncated", "empty", "bit-flipped", "wrong shape")
    ]
    + [("problem.json", how, "problem.json") for how in ("truncated", "empty", "wrong kind")]
    + [("summary.json", how, "summary.json") for how in ("truncated", "empty", "wrong kind")]
    + [("finished.json", "truncated", "density.npy")]
)


@pytest.mark.parametrize("name,how,named", DAMAGED_RUN, ids=[f"{n} {h}" for n, h, _ in DAMAGED_RUN])
def test_export_of_a_damaged_run_names_the_file(name, how, named, finished_run, tmp_path, capsys):
    import shutil

    run = tmp_path / "run"
    shutil.copytree(finished_run, run)
    damage(run / name, how)
    code, err = call(["export", run], capsys)
    assert code == 2, err
    assert str(run / named) in err and ("damaged" in err or "does not match" in err), err
    assert "run the problem again" in err and "Traceback" not in err


CHECKPOINT_DAMAGE = ["truncated", "empty", "bit-flipped", "wrong shape", "wrong length"]


@pytest.mark.parametrize("how", CHECKPOINT_DAMAGE)
def test_resume_from_a_damaged_checkpoint_names_it(how, tmp_path, capsys, monkeypatch):
    f = write(
        tmp_path / "p.toml",
        GOOD.replace("max_iterations = 12", "max_iterations = 12\ncheckpoint_interval = 2"),
    )
    out = tmp_path / "run"

    def stop(row):
        if row["iteration"] == 5:
            raise KeyboardInterrupt

    with monkeypatch.context() as m:
        m.setattr("topo.cli._progress", stop)
        assert call(["run", f, "--out", out], capsys)[0] == 130
    ckpt = out / "checkpoint.npz"
    if how == "wrong length":  # a readable file whose design does not fit the grid
        with np.load(ckpt) as data:
            parts = {k: data[k] for k in data.files}
        parts["x"] = parts["x"][:-3]
        with open(ckpt, "wb") as fh:
            np.savez(fh, **parts)
    elif how == "wrong shape":
        ckpt.write_bytes(b"PK\x05\x06" + b"\x00" * 18)  # an empty zip archive
    else:
        damage(ckpt, how)
    code, err = call(["run", "--resume", out, "--quiet"], capsys)
    assert code == 2, err
    assert str(ckpt) in err and "damaged" in err and "without --resume" in err, err
    assert "Traceback" not in err


# ------------------------------------------------------------- writers and interrupts


def test_a_second_writer_is_refused_and_a_stale_lock_taken_over(tmp_path, capsys):
    f = write(tmp_path / "p.toml", GOOD)
    out = tmp_path / "run"
    with runfolder.OutputFolder(out):  # this process writes there
        code, err = call(["run", f, "--out", out, "--quiet"], capsys)
        assert code == 2 and f"pid {os.getpid()}" in err and "another topo process" in err
    assert not (out / runfolder.LOCK).exists()
    (out / runfolder.LOCK).write_text("999999999\n")  # no such process
    (out / ".checkpoint.npz.abc.tmp").write_bytes(b"half")  # a killed checkpoint write
    assert call(["run", f, "--out", out, "--quiet"], capsys)[0] == 0
    assert sorted(p.name for p in out.iterdir() if p.name.startswith(".")) == []


@pytest.mark.skipif(os.geteuid() == 0, reason="root may write into any folder")
def test_a_folder_that_cannot_be_written_is_refused_before_the_loop(tmp_path, capsys):
    f = write(tmp_path / "p.toml", GOOD)
    out = tmp_path / "run"
    out.mkdir()
    out.chmod(0o500)
    try:
        code, err = call(["run", f, "--out", out, "--quiet"], capsys)
    finally:
        out.chmod(0o700)
    assert code == 2 and "not writable" in err


def test_stopped_sweep_writes_its_table_and_says_how_to_continue(tmp_path, capsys, monkeypatch):
    sweep_module = sys.modules["topo.sweep"]

    f = write(tmp_path / "p.toml", GOOD)
    out = tmp_path / "sweep"
    argv = ["sweep", str(f), "--vary", "optimization.volume_fraction=0.3,0.4", "--out", str(out)]
    original = sweep_module.run_one
    calls = {"n": 0}

    def second_stops(*a, **k):
        calls["n"] += 1
        if calls["n"] == 2:
            raise KeyboardInterrupt
        return original(*a, **k)

    with monkeypatch.context() as m:
        m.setattr(sweep_module, "run_one", second_stops)
        code, err = call(argv, capsys)
    assert code == 130
    assert "continue with the same command: topo sweep" in err and str(out) in err
    rows = (out / "sweep.csv").read_text().splitlines()
    assert len(rows) == 2 and "0.3" in rows[1]  # header and the finished run
    assert call(argv, capsys)[0] == 0
    assert len((out / "sweep.csv").read_text().splitlines()) == 3


def test_a_half_exported_run_is_not_counted_finished_by_a_sweep(tmp_path, capsys, monkeypatch):
    """`topo export` over a folder whose run stopped in the export writes a summary,
    but no finished.json: the sweep runs it again."""
    sweep_module = sys.modules["topo.sweep"]

    f = write(tmp_path / "p.toml", GOOD)
    out = tmp_path / "sweep"
    argv = ["sweep", str(f), "--vary", "optimization.volume_fraction=0.4", "--out", str(out)]
    assert call(argv, capsys)[0] == 0
    run = next(p for p in out.iterdir() if p.is_dir())
    (run / "finished.json").unlink()
    assert call(["export", run], capsys)[0] == 2  # export refuses; the summary stays
    assert sweep_module._finished(json.loads((run / "problem.json").read_text()), run) is None
    assert call(argv, capsys)[0] == 0
    assert runfolder.finished(run) is not None  # run again, and finished this time


def test_closed_stdout_ends_quietly(tmp_path, capsys, monkeypatch):
    f = write(tmp_path / "p.toml", GOOD)
    read, written = os.pipe()
    os.close(read)  # the reader went away, as `topo ... | head` after its lines
    stdout = os.fdopen(written, "w")
    monkeypatch.setattr("sys.stdout", stdout)
    code = main(["run", str(f), "--out", str(tmp_path / "run")])
    assert code == 0
    assert capsys.readouterr().err == ""
    assert runfolder.finished(tmp_path / "run") is not None  # the run went on to the end
    assert not (tmp_path / "run" / "error.log").exists()


# ------------------------------------------------------------------ loader fuzz

from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from topo.problem import ProblemError, load_problem  # noqa: E402

FUZZ = settings(
    max_examples=300, deadline=None, derandomize=True, suppress_health_check=list(HealthCheck)
)


def loads_or_refuses(tmp_path, content) -> None:
    f = write(tmp_path / "fuzz.toml", content)
    try:
        load_problem(f)
    except ProblemError:
        pass  # any other exception fails the test


@FUZZ
@given(st.binary(max_size=200))
def test_fuzz_arbitrary_bytes(tmp_path_factory, data):
    loads_or_refuses(tmp_path_factory.mktemp("f"), data)


@FUZZ
@given(st.integers(0, len(GOOD)), st.integers(0, 40), st.text(max_size=30))
def test_fuzz_spliced_text(tmp_path_factory, at, cut, insert):
    """The good file with a stretch replaced by random text (any Unicode)."""
    loads_or_refuses(tmp_path_factory.mktemp("f"), GOOD[:at] + insert + GOOD[at + cut :])


VALUES = st.one_of(
    st.floats(allow_nan=False),
    st.integers(-(2**63), 2**63 - 1),
    st.sampled_from(["1e308", "-1e308", "1e-320", "inf", "nan", '"x"', "true", "[]", "{}"]),
)


@FUZZ
@given(
    st.sampled_from(
        [
            "20.0, 10.0",
            "1.0",
            "2.0",
            "0.4",
            "12",
            "0.0, -10.0",
            "20.0, 5.0",
        ]
    ),
    VALUES,
)
def test_fuzz_one_value(tmp_path_factory, original, value):
    """One number of the good file replaced by an extreme or wrong-typed value."""
    text = value if isinstance(value, str) else repr(value)
    if isinstance(value, float) and not np.isfinite(value):
        text = "inf" if value > 0 else "-inf"
    loads_or_refuses(tmp_path_factory.mktemp("f"), GOOD.replace(original, text, 1))


def test_a_full_disk_keeps_the_last_checkpoint_and_says_so(tmp_path, capsys, monkeypatch):
    from topo import files

    f = write(
        tmp_path / "p.toml",
        GOOD.replace("max_iterations = 12", "max_iterations = 12\ncheckpoint_interval = 2"),
    )
    out = tmp_path / "run"
    real_mkstemp = files.tempfile.mkstemp
    saves = {"n": 0}

    def full_after_first(prefix, suffix, dir):
        fd, tmp = real_mkstemp(prefix=prefix, suffix=suffix, dir=dir)
        if prefix.startswith(".checkpoint.npz"):
            saves["n"] += 1
            if saves["n"] > 1:  # the disk is full from the second save on
                os.close(fd)
                fd = os.open("/dev/full", os.O_WRONLY)  # every write: ENOSPC
        return fd, tmp

    with monkeypatch.context() as m:
        m.setattr(files.tempfile, "mkstemp", full_after_first)
        code, err = call(["run", f, "--out", out, "--quiet"], capsys)
    assert code == 2, err
    assert f"cannot write {out / 'checkpoint.npz'}: No space left on device" in err
    assert f"topo run --resume {out}" in err and "Traceback" not in err
    assert not (out / "error.log").exists()
    assert sorted(p.name for p in out.iterdir()) == ["checkpoint.npz"]  # of iteration 2
    assert call(["run", "--resume", out, "--quiet"], capsys)[0] == 0


def test_a_lock_that_cannot_be_made_is_refused_before_the_loop(tmp_path, capsys, monkeypatch):
    """What a folder without write permission gives (also when running as root)."""
    f = write(tmp_path / "p.toml", GOOD)
    real_open = os.open

    def refuse_lock(path, *a, **k):
        if str(path).endswith(runfolder.LOCK):
            raise PermissionError(13, "Permission denied", str(path))
        return real_open(path, *a, **k)

    monkeypatch.setattr(runfolder.os, "open", refuse_lock)
    code, err = call(["run", f, "--out", tmp_path / "run", "--quiet"], capsys)
    assert code == 2 and "--out" in err and "not writable (Permission denied)" in err
    assert not (tmp_path / "run").exists()


def test_a_stopped_parallel_sweep_stops_its_workers(tmp_path, capsys, monkeypatch):
    """Ctrl-C reaching the sweep's process alone (not its workers): the workers are
    stopped too, and the table of the finished runs is written. One run takes 5
    iterations, the other would take 3000; the stop comes as the short one is done."""
    import multiprocessing as mp

    f = write(tmp_path / "p.toml", GOOD.replace("max_iterations = 12", "tolerance = 1e-12"))
    out = tmp_path / "sweep"
    argv = ["sweep", f, "--vary", "optimization.max_iterations=5,3000", "--jobs", "2"]

    def stop_on_first_result(text):
        if text.startswith("[1/2]"):
            raise KeyboardInterrupt  # as SIGINT to this process would, while it waits

    monkeypatch.setattr("topo.cli._print", stop_on_first_result)
    code, err = call([*argv, "--out", out], capsys)
    assert code == 130 and "continue with the same command" in err
    rows = (out / "sweep.csv").read_text().splitlines()
    assert len(rows) == 2 and rows[1].startswith("5,")
    assert mp.active_children() == []  # no worker runs on
    assert runfolder.finished(out / "max_iterations-3000") is None
