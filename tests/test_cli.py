"""The command line, run as a user would: a subprocess of ``python -m saxsnb``."""

import subprocess
import sys

import pytest

import saxsnb
from saxsnb.__main__ import COMMANDS, main


def run(*args):
    return subprocess.run([sys.executable, "-m", "saxsnb", *args], capture_output=True, text=True,
                          timeout=120)


def test_version():
    r = run("--version")
    assert r.returncode == 0 and r.stdout.strip() == f"saxsnb {saxsnb.__version__}"


def test_demo_writes_folders_with_headers(tmp_path):
    out = tmp_path / "demo data"
    r = run("demo", "--out", str(out), "--names", "unfolding", "flow-growth", "--seed", "5")
    assert r.returncode == 0, r.stderr
    assert "unfolding: 41 curves" in r.stdout
    assert sorted(p.name for p in out.iterdir()) == ["flow-growth", "unfolding"]
    files = sorted((out / "unfolding").glob("titration_D*M_*.dat"))
    assert len(files) == 41 and len(list((out / "unfolding" / "background").glob("*.dat"))) == 41
    head = files[20].read_text().splitlines()[:7]
    assert head == [
        "# saxsnb series frame 20",
        "# sample = globular protein model GP-12, 4 mg/ml, denaturant titration (fictional)",
        "# q_unit = 1/nm",
        "# intensity_unit = 1/cm",
        "# denaturant = 3",
        "# denaturant_units = M",
        "# q I sigma",
    ]
    assert files[20].name == "titration_D3.000M_0020.dat"
    assert len(list((out / "flow-growth").glob("flow_X*mm_*.dat"))) == 60
    assert (out / "flow-growth" / "README.md").exists()


def test_demo_same_seed_same_files(tmp_path, capsys):
    for d in ("a", "b"):
        assert main(["demo", "--out", str(tmp_path / d), "--names", "unfolding", "--seed", "1"]) == 0
    assert "synthetic" in capsys.readouterr().out
    name = "unfolding/titration_D0.150M_0001.dat"
    assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()


@pytest.mark.parametrize(
    "args,code,message",
    [
        ((), 2, "usage"),
        (("demo",), 2, "--out"),
        (("demo", "--out", "x", "--names", "bogus"), 2, "invalid choice"),
        (("demo", "--out", "x", "--seed", "one"), 2, "invalid int"),
        (("nothing",), 2, "invalid choice"),
    ],
)
def test_usage_errors(tmp_path, monkeypatch, capsys, args, code, message):
    # in-process (same main() as the console script) to keep the suite fast
    monkeypatch.chdir(tmp_path)
    try:
        rc = main(list(args))
    except SystemExit as exc:  # argparse exits on usage errors
        rc = exc.code
    assert rc == code
    assert message in capsys.readouterr().err
    assert not (tmp_path / "x").exists()


def test_unwritable_output_is_a_clear_error(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    r = run("demo", "--out", str(blocker / "sub"), "--names", "unfolding")
    assert r.returncode == 1
    assert "saxsnb demo: error:" in r.stderr and str(blocker) in r.stderr
    assert "Traceback" not in r.stderr


def test_commands_table_is_extensible():
    help_text, add_arguments, run_command = COMMANDS["demo"]
    assert callable(add_arguments) and callable(run_command) and help_text
