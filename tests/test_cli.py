"""The batch command: help texts, exit codes (0 ok, 2 input error, 1 internal error), summary.

Exit-code convention: 0 success, 2 usage/input error (the convention of Python's argparse and
of POSIX utilities, common practice), 1 any other failure.
"""

from __future__ import annotations

import io
import re

import pytest

import core.run as run_mod
from core.cli import EXIT_INPUT, EXIT_INTERNAL, EXIT_OK, ProgressBar, build_parser, main
from core.validation import InputError

FORECAST_OPTIONS = [
    "--wells", "--out", "--sheet", "--econ-limit-bopd", "--econ-limit-mcfd", "--pressure-kind", "--max-file-mb", "--oil-price", "--gas-price",
    "--opex-per-month", "--nri", "--wi", "--severance-tax", "--as-of", "--b-max",
    "--terminal-decline", "--horizon-years", "--workers", "--units", "--unit-column", "--db",
    "--field-name", "--no-xlsx", "--progress", "--quiet", "--debug", "--date-order",
    "--samples", "--seed", "--scheduler", "--type-wells", "--block-wells",
]


def _run(argv):
    out, err = io.StringIO(), io.StringIO()
    code = main(argv, stdout=out, stderr=err)
    return code, out.getvalue(), err.getvalue()


def _option_help(parser_help: str, option: str) -> str:
    """The help paragraph of one option in argparse's output."""
    m = re.search(rf"^\s+{re.escape(option)}\b.*?(?=^\s+--|\Z|^\S)", parser_help, re.S | re.M)
    assert m, f"{option} not documented"
    return " ".join(m.group(0).split())


@pytest.mark.parametrize("argv", [["--help"], ["forecast", "--help"]])
def test_help_documents_every_option_with_default(argv, capsys):
    with pytest.raises(SystemExit) as exc:
        build_parser().parse_args(argv)
    assert exc.value.code == 0
    text = capsys.readouterr().out
    for opt in FORECAST_OPTIONS:
        para = _option_help(text, opt)
        assert "Default" in para or "required" in para, para
    # units are named for the quantities that have one
    for opt, unit in [("--econ-limit-bopd", "[bbl/d]"), ("--oil-price", "[$/bbl]"), ("--gas-price", "[$/Mcf]"),
                      ("--opex-per-month", "[$/month]"), ("--terminal-decline", "[1/yr]"), ("--horizon-years", "[yr]")]:
        assert unit in _option_help(text, opt)


def test_main_help_returns_zero():
    assert main(["--help"]) == EXIT_OK


def test_no_command_is_a_usage_error():
    code, _, err = _run([])
    assert code == EXIT_INPUT and "forecast" in err


@pytest.mark.parametrize(
    "extra, words",
    [
        (["--b-max", "3"], "b_max"),
        (["--terminal-decline", "6"], "terminal_decline"),
        (["--econ-limit-bopd", "2", "--oil-price", "70"], "either"),
        (["--oil-price", "70"], "missing: opex_per_month, nri"),
        (["--nri", "1.5", "--oil-price", "70", "--opex-per-month", "3000"], "nri"),
        (["--as-of", "last spring"], "as_of"),
        (["--econ-limit-bopd", "-1"], "econ_limit_bopd"),
        (["--workers", "0"], "workers"),
    ],
)
def test_bad_option_values_exit_2_with_one_message(tmp_path, extra, words):
    f = tmp_path / "p.csv"
    f.write_text("well,month,oil\nA,2020-01,10\n")
    code, out, err = _run(["forecast", str(f), "--out", str(tmp_path / "o"), *extra])
    assert code == EXIT_INPUT
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and words in lines[0]
    assert "Traceback" not in err


def test_argparse_errors_exit_2(tmp_path):
    code, _, err = _run(["forecast", "x.csv", "--out", str(tmp_path), "--b-max", "abc"])
    assert code == EXIT_INPUT and "invalid float" in err
    code, _, _ = _run(["forecast", "x.csv"])  # --out missing
    assert code == EXIT_INPUT


def test_missing_input_file_exit_2(tmp_path):
    code, _, err = _run(["forecast", str(tmp_path / "none.csv"), "--out", str(tmp_path / "o")])
    assert code == EXIT_INPUT and "not found" in err and len(err.strip().splitlines()) == 1


def test_out_is_a_file_exit_2(tmp_path):
    f = tmp_path / "p.csv"
    f.write_text("well,month,oil\nA,2020-01,10\n")
    code, _, err = _run(["forecast", str(f), "--out", str(f)])
    assert code == EXIT_INPUT and "not a folder" in err


def test_loader_input_error_exit_2(tmp_path, monkeypatch):
    f = tmp_path / "p.csv"
    f.write_text("x")

    def bad_load(*a, **k):
        raise InputError(f"{f.name}: the file has no header row")

    monkeypatch.setattr(run_mod, "load_inputs", bad_load)
    code, out, err = _run(["forecast", str(f), "--out", str(tmp_path / "o")])
    assert code == EXIT_INPUT and out == ""
    assert err.strip() == f"error: {f.name}: the file has no header row"


@pytest.mark.parametrize("debug", [False, True])
def test_internal_error_exit_1(tmp_path, monkeypatch, debug):
    f = tmp_path / "p.csv"
    f.write_text("well,month,oil\nA,2020-01,10\n")
    monkeypatch.setattr(run_mod, "load_inputs", lambda *a, **k: object())

    def boom(*a, **k):
        raise RuntimeError("a bug")

    monkeypatch.setattr(run_mod, "run_field", boom)
    argv = ["forecast", str(f), "--out", str(tmp_path / "o")] + (["--debug"] if debug else [])
    code, out, err = _run(argv)
    assert code == EXIT_INTERNAL and out == ""
    assert "internal error" in err and "RuntimeError: a bug" in err
    assert ("Traceback" in err) == debug


def test_value_error_inside_the_run_is_internal(tmp_path, monkeypatch):
    # a ValueError raised by computation (not by loading or options) is a bug, not bad input
    f = tmp_path / "p.csv"
    f.write_text("well,month,oil\nA,2020-01,10\n")
    monkeypatch.setattr(run_mod, "load_inputs", lambda *a, **k: object())

    def boom(*a, **k):
        raise ValueError("shapes do not match")

    monkeypatch.setattr(run_mod, "run_field", boom)
    code, _, err = _run(["forecast", str(f), "--out", str(tmp_path / "o")])
    assert code == EXIT_INTERNAL and "shapes do not match" in err


def test_progress_bar_draws_only_when_enabled():
    s = io.StringIO()
    bar = ProgressBar(s, enabled=False)
    bar(0.5, "half")
    bar.close()
    assert s.getvalue() == ""
    bar = ProgressBar(s, enabled=True, width=10)
    bar(0.5, "half")
    bar(1.0, "done")
    bar.close()
    text = s.getvalue()
    assert "[#####.....]  50%  half" in text and "[##########] 100%  done" in text and text.endswith("\n")


def test_input_options_reach_the_loader(tmp_path, monkeypatch):
    # --units, --unit-column, --sheet, --pressure-kind, --max-file-mb and --wells are loader inputs
    import core.production as production

    seen = {}

    def fake_load(source, **kwargs):
        seen.update(kwargs, source=source)
        raise InputError("stop here")

    monkeypatch.setattr(production, "load_production", fake_load)
    f = tmp_path / "p.xlsx"
    f.write_bytes(b"x")
    h = tmp_path / "h.csv"
    h.write_text("well_id\nA\n")
    code, _, err = _run(["forecast", str(f), "--out", str(tmp_path / "o"), "--units", "metric",
                         "--unit-column", "Zone", "--sheet", "Monthly", "--pressure-kind", "static_bhp",
                         "--max-file-mb", "1.5", "--wells", str(h), "--date-order", "dmy"])
    assert code == EXIT_INPUT and "stop here" in err
    assert seen["units"] == "metric" and seen["unit_column"] == "Zone" and seen["sheet"] == "Monthly"
    assert seen["pressure_kind"] == "static_bhp" and seen["max_bytes"] == int(1.5 * 2**20)
    assert str(seen["well_header"]) == str(h) and str(seen["source"]) == str(f)
    assert seen["dayfirst"] is True


def test_ambiguous_dates_message_names_the_option(tmp_path):
    f = tmp_path / "p.csv"
    f.write_text("well,date,oil\nA,03/04/2021,10\nA,04/05/2021,9\nA,05/06/2021,8\n")
    code, _, err = _run(["forecast", str(f), "--out", str(tmp_path / "o"), "--no-xlsx"])
    assert code == EXIT_INPUT and "--date-order" in err and len(err.strip().splitlines()) == 1


def test_our_warnings_are_summarised_on_stderr(tmp_path, monkeypatch):
    import warnings as _w

    import core.export as export_mod
    from core.run import RunResult, RunSettings
    from core.validation import OutOfRangeWarning

    f = tmp_path / "p.csv"
    f.write_text("well,month,oil\nA,2020-01,10\n")
    monkeypatch.setattr(run_mod, "load_inputs", lambda *a, **k: object())
    fake = RunResult(wells=None, monthly=None, units=None, load_report=None, candidates=None, stages=None,
                     settings=RunSettings(), version="0", as_of=None, summary={"wells_read": 1})

    def warn_and_run(*a, **k):
        _w.warn("api 70 outside the range of Standing (1947)", OutOfRangeWarning)
        _w.warn("some library change", DeprecationWarning)
        return fake

    monkeypatch.setattr(run_mod, "run_field", warn_and_run)
    monkeypatch.setattr(export_mod, "write_outputs", lambda *a, **k: {})
    code, out, err = _run(["forecast", str(f), "--out", str(tmp_path / "o")])
    assert code == EXIT_OK and "wells read: 1" in out
    assert "1 warning(s)" in err and "OutOfRangeWarning: api 70" in err and "DeprecationWarning" not in err


# --------------------------------------------------------------------------------------------
# the streamed run by blocks of wells (core.streamed)
# --------------------------------------------------------------------------------------------
SAMPLE = "sample_wells/production.csv"


def test_block_wells_help_states_the_rule():
    text = " ".join(build_parser().format_help().split())
    assert "--block-wells N" in text
    assert "0 = never stream" in text and "MiB or more" in text


def test_large_input_is_streamed_by_the_rule(tmp_path, monkeypatch):
    import core.streamed as streamed_mod

    monkeypatch.setattr(streamed_mod, "STREAM_MIN_BYTES", 1000)  # the sample file counts as large
    monkeypatch.setattr(streamed_mod, "DEFAULT_BLOCK_WELLS", 20)
    code, out, err = _run(["forecast", SAMPLE, "--out", str(tmp_path / "o"), "--no-xlsx"])
    assert code == EXIT_OK, err
    assert "streamed run: 3 block(s) of up to 20 wells" in out
    assert "wells read: 47" in out
    code, out, err = _run(["forecast", SAMPLE, "--out", str(tmp_path / "p"), "--no-xlsx", "--block-wells", "0"])
    assert code == EXIT_OK and "streamed run" not in out


@pytest.mark.parametrize("extra", [["--samples", "50"], ["--type-wells"], ["--db", "x.sqlite"]])
def test_streamed_run_refuses_whole_field_options(tmp_path, extra):
    code, out, err = _run(["forecast", SAMPLE, "--out", str(tmp_path / "o"), "--block-wells", "10", *extra])
    assert code == EXIT_INPUT
    assert err.count("\n") == 1 and "--block-wells 0" in err and extra[0] in err


def test_negative_block_wells_is_an_input_error(tmp_path):
    code, out, err = _run(["forecast", SAMPLE, "--out", str(tmp_path / "o"), "--block-wells", "-3"])
    assert code == EXIT_INPUT and "--block-wells" in err


def test_xlsx_input_falls_back_to_the_normal_run(tmp_path):
    import pandas as pd

    src = tmp_path / "p.xlsx"
    pd.read_csv(SAMPLE).head(400).to_excel(src, index=False)
    code, out, err = _run(["forecast", str(src), "--out", str(tmp_path / "o"), "--no-xlsx", "--block-wells", "5"])
    assert code == EXIT_OK, err
    assert "not streamed (an XLSX workbook is read whole)" in err
