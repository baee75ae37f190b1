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
