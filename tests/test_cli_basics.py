"""Command-line skeleton: help, thermal calculator, exit codes, light import."""

import subprocess
import sys

import pytest

from cavchar.thermal import effective_temperature, planck_occupation


def test_help_lists_commands(run_cli):
    code, out, _ = run_cli("--help")
    assert code == 0
    assert "thermal" in out


def test_thermal_prints_occupation_and_temperature(run_cli):
    code, out, err = run_cli("thermal", "--freq", "6.8GHz", "--temp", "40mK", "--n-thermal", "0.01")
    assert code == 0, err
    assert f"{float(planck_occupation(6.8e9, 0.04)):.6g}" in out
    assert f"{effective_temperature(6.8e9, 0.01) * 1e3:.6g} mK" in out


@pytest.mark.parametrize(
    "argv",
    [
        ("thermal", "--freq", "6.8Gz", "--temp", "40mK"),
        ("thermal", "--freq", "6.8GHz"),
        ("thermal", "--freq", "6.8GHz", "--temp", "-4mK"),
        ("no-such-command",),
    ],
)
def test_user_mistakes_exit_2_without_traceback(run_cli, argv):
    code, out, err = run_cli(*argv)
    assert code == 2
    assert "Traceback" not in err + out


def test_thermal_help_has_units_and_example(run_cli):
    code, out, _ = run_cli("thermal", "--help")
    assert code == 0
    assert "6.8GHz" in out and "mK" in out


def test_import_is_light(modules_loaded_by):
    # STYLE: `import cavchar` must not pull in plotting libraries or numba
    assert modules_loaded_by("cavchar, cavchar.thermal, cavchar.dynamics, cavchar.units",
                             ("matplotlib", "corner", "numba", "emcee")) == []


def test_console_script_runs():
    proc = subprocess.run([sys.executable, "-m", "cavchar.cli.main", "thermal", "--freq", "5GHz",
                           "--temp", "50mK"], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    assert "8.30437e-03" in proc.stdout or "0.00830437" in proc.stdout


def test_a_reader_that_stops_early_ends_the_command_quietly():
    """`cavchar ... | head -1`: the command's later writes meet a closed pipe; it stops with
    exit 141 (128 + SIGPIPE) and no traceback (more output than a pipe buffer holds)."""
    import subprocess
    import sys

    temps = [arg for k in range(1, 3001) for arg in ("--temp", f"{k}mK")]
    child = subprocess.Popen([sys.executable, "-c", "from cavchar.cli.main import run; run()",
                              "thermal", "--freq", "6.8GHz", *temps],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    child.stdout.readline()
    child.stdout.close()
    err = child.stderr.read().decode()
    assert child.wait(timeout=120) == 141
    assert "Traceback" not in err and "Exception ignored" not in err, err
