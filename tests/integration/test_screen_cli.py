"""`dopantgap screen` as a researcher runs it on the demo model."""

import pandas as pd
import pytest

from dopantgap.cli import main


def test_screen_writes_ranked_verdicts_and_says_its_assumptions(demo_model_dir, tmp_path, capsys):
    out = tmp_path / "screen.csv"
    hosts = tmp_path / "hosts.csv"
    hosts.write_text("host,formula,site,multiplicity,coordination\nZnS,ZnS,sub_Zn,1,12\nZnS,ZnS,int_hex,2,\n")
    status = main([
        "screen", str(demo_model_dir), "--out", str(out), "--window", "E_bind:-inf:-1",
        "--lowest-site", "sub_Zn", "--temperature", "900", "--hosts", str(hosts), "--cost", "gga=1,hyb=30",
    ])
    printed = capsys.readouterr().out
    assert status == 0
    frame = pd.read_csv(out)
    assert {"probability", "verdict", "decisive_cell", "bound_vacancies", "pop sub_Zn"} <= set(frame.columns)
    assert set(frame["verdict"]) <= {"yes", "undecided", "no"}
    assert "E_bind <= -1 AND sub_Zn lowest" in printed
    assert "ZnS at hyb:" in printed and "undecided" in printed
    assert "Z = 12" in printed and "negative = bound" in printed
    assert "never replaces them" in printed and "local safety rules" in printed
    assert "C at gga not screened" in printed


@pytest.mark.parametrize(
    "options, fragment",
    [
        (["--window", "E_bind:-inf"], "QUANTITY[@SITE]:LOW:HIGH"),
        ([], "at least one condition"),
        (["--lowest-site", "sub_Zn", "--confidence", "0.3"], "--confidence"),
        (["--lowest-site", "sub_Zn", "--temperature", "hot"], "kelvin"),
        (["--window", "E_sol:-inf:0"], "name one"),
        (["--lowest-site", "sub_Zn", "--binding-positive", "--binding-negative"], "not allowed with"),
    ],
)
def test_screen_refuses_bad_requests_in_one_line(demo_model_dir, tmp_path, capsys, options, fragment):
    try:
        status = main(["screen", str(demo_model_dir), "--out", str(tmp_path / "s.csv"), *options])
    except SystemExit as stop:  # argparse's own refusals
        status = stop.code
    error = capsys.readouterr().err
    assert status == 2
    assert fragment in error
    assert "Traceback" not in error
    assert not (tmp_path / "s.csv").exists()


def test_report_takes_the_screen_and_refuses_a_file_that_is_not_one(demo_model_dir, tmp_path, capsys):
    screen_csv = tmp_path / "screen.csv"
    assert main(["screen", str(demo_model_dir), "--out", str(screen_csv), "--window", "E_bind:-inf:-1",
                 "--lowest-site", "sub_Zn", "--quiet"]) == 0
    page = tmp_path / "report.html"
    assert main(["report", str(demo_model_dir), "--out", str(page), "--screen", str(screen_csv), "--quiet"]) == 0
    html = page.read_text(encoding="utf-8")
    assert "Screen: which elements meet the conditions" in html
    assert "E_bind &lt;= -1 AND sub_Zn lowest" in html or "E_bind <= -1 AND sub_Zn lowest" in html
    capsys.readouterr()
    not_a_screen = tmp_path / "table.csv"
    not_a_screen.write_text("element,host,site,method,quantity,value\nTi,ZnS,sub_Zn,gga,E_sol,1.0\n")
    assert main(["report", str(demo_model_dir), "--out", str(tmp_path / "r2.html"), "--screen", str(not_a_screen)]) == 2
    error = capsys.readouterr().err
    assert "not a screen output" in error and "table.csv" in error
    assert not (tmp_path / "r2.html").exists()
