"""--scheduler errors, --quiet and progress bars through the CLI runner, reading the study back."""

from __future__ import annotations

import io

import pytest

from tests.execution.workflow import run_cli
from tracker.api import Study
from tracker.progress import Bars


@pytest.fixture
def imported(tmp_path, events_file):
    db = tmp_path / "s.db"
    run_cli(db, "import", str(events_file), "--source", "from_office", "--target", "to_office", "--date", "day")
    return db


@pytest.mark.parametrize("how", ["option", "environment"])
def test_unreachable_scheduler_is_one_line_and_changes_nothing(imported, how):
    address = "tcp://127.0.0.1:9"  # the discard port: nothing listens there
    env = {"ROLETRAIL_SCHEDULER_TIMEOUT": "1"}
    args = ["fit", "--draws", "0"]  # the scheduler is reached before any work, whatever the method
    if how == "option":
        args += ["--scheduler", address]
    else:
        env["ROLETRAIL_SCHEDULER"] = address
    result = run_cli(imported, *args, env=env, ok=False)
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith(f"roletrail: error: cannot reach the Dask scheduler at {address}")
    assert "dask scheduler" in lines[0] and "--scheduler" in lines[0]
    with Study(imported, create=False) as study:
        assert study.fits().empty


def test_malformed_scheduler_address_is_one_line(imported):
    result = run_cli(imported, "structures", "--scheduler", "no such host:port", ok=False,
                     env={"ROLETRAIL_SCHEDULER_TIMEOUT": "1"})
    assert result.exit_code == 2
    assert len(result.stderr.strip().splitlines()) == 1
    assert "cannot reach the Dask scheduler at no such host:port" in result.stderr


def test_workers_must_be_positive(imported):
    result = run_cli(imported, "fit", "--workers", "0", ok=False)
    assert result.exit_code == 2 and "--workers" in result.output


def test_piped_output_has_no_bars_and_equals_quiet_output(tmp_path, events_file):
    outputs = []
    for quiet in ([], ["--quiet"]):
        db = tmp_path / f"s{len(outputs)}.db"
        run_cli(db, "import", str(events_file), "--source", "from_office", "--target", "to_office", "--date", "day",
                *quiet)
        result = run_cli(db, "fit", "--method", "structural", "--positions", "3", "--smooth", "off", "--draws", "9",
                         "--workers", "1", *quiet)
        outputs.append(result.stdout)
        assert "\x1b[" not in result.output and "fitting periods" not in result.output
        assert result.stderr == ""
        with Study(db, create=False) as study:
            assert len(study.fit_periods()) == 4
    assert outputs[0] == outputs[1]


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_bars_draw_on_a_terminal_with_count_and_estimate():
    stream = _Terminal()
    with Bars(stream=stream) as bars:
        update = bars("fitting periods", 4)
        for done in range(1, 5):
            update(done, 4)
        bytes_read = bars("importing events.csv", None, unit="bytes")
        bytes_read(3_000_000, 6_000_000)
    text = stream.getvalue()
    assert "fitting periods" in text and "/4" in text and "left" in text
    assert "importing events.csv (MB)" in text


def test_bars_are_silent_when_quiet_or_not_a_terminal():
    for bars in (Bars(quiet=True, stream=_Terminal()), Bars(stream=io.StringIO())):
        with bars:
            bars("fitting periods", 3)(3, 3)
        assert bars._stream.getvalue() == ""


def test_api_progress_callback_still_called_once_per_period(imported):
    seen = []
    with Study(imported, create=False, workers=2) as study:
        study.fit(method="structural", positions=3, smoothing=0, draws=0, progress=seen.append)  # one task per period
        assert sorted(seen) == sorted(study.periods())


def test_results_printed_while_a_bar_runs_stay_on_standard_output(capsys):
    stream = _Terminal()
    with Bars(stream=stream) as bars:
        update = bars("testing structures", 2)
        update(1, 2)
        print("period,relation,ideal")
        update(2, 2)
    assert capsys.readouterr().out == "period,relation,ideal\n"
    assert "period,relation" not in stream.getvalue() and "testing structures" in stream.getvalue()
