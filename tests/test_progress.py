"""Progress lines: iteration n of the limit, constraint values, time left; in a pipe
only every tenth iteration."""

from problems import tiny_bracket_toml
from topo.cli import main
from topo.report import format_progress


def test_progress_line_reads_n_of_max_constraints_and_time_left():
    row = {
        "iteration": 20,
        "max_iterations": 200,
        "objective": 123.0,
        "volume_fraction": 0.3,
        "change": 0.05,
        "beta": 4.0,
        "solver_iterations": None,
        "solver": "cholmod",
        "seconds": 0.5,
        "elapsed": 10.0,
        "constraints": {"material": 0.0, "deflection[tip, down]": -0.25},
    }
    (line,) = format_progress(row)
    assert line.startswith("iter   20/200")
    assert "deflection[tip, down] -0.250" in line and "material" not in line
    assert "10 s so far, at most 90 s left" in line  # 10 s / 20 × 180


def test_progress_in_a_pipe_prints_the_first_and_every_tenth_iteration(tmp_path, capsys):
    f = tmp_path / "tiny.toml"
    f.write_text(tiny_bracket_toml(max_iterations=25, beta_interval=5))
    assert main(["run", str(f), "--out", str(tmp_path / "r")]) == 0
    iterations = [
        int(line.split()[1].split("/")[0])
        for line in capsys.readouterr().out.splitlines()
        if line.startswith("iter ")
    ]
    assert iterations[:3] == [1, 10, 20]
