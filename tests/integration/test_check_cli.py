"""``check`` as fit's gatekeeper, and outputs that would replace the user's inputs.

Every table here is INVENTED: a made-up smooth function of the atomic number.
"""

import numpy as np
import pandas as pd
import pytest

from dopantgap.cli import main
from dopantgap.symbols import atomic_number

pytestmark = pytest.mark.slow

ELEMENTS = ("Li", "Be", "B", "Na", "Mg", "Al", "K", "Ca", "Ti", "V", "Cr", "Fe", "Co", "Ni", "Cu", "Zn")


def invented_table(host="MgO", sites=("sub_Mg", "int_oct")):
    rows = []
    for element in ELEMENTS:
        z = atomic_number(element)
        values = {"sub_Mg": 1.0 + 0.05 * z + 0.3 * np.sin(z), "int_oct": 2.0 + 0.04 * z + 0.2 * np.cos(z)}
        for site in sites:
            rows.append({"element": element, "host": host, "site": site, "method": "gga",
                         "quantity": "E_sol", "value": round(values.get(site, values["int_oct"]), 3)})
    return pd.DataFrame(rows)


@pytest.fixture(scope="module")
def model(tmp_path_factory):
    folder = tmp_path_factory.mktemp("check")
    table_path = folder / "energies.csv"
    invented_table().to_csv(table_path, index=False)
    model_dir = folder / "model"
    assert main(["fit", str(table_path), "--out", str(model_dir), "--learner", "gp", "--quiet"]) == 0
    return {"folder": folder, "table": table_path, "model": model_dir}


def test_check_shows_how_hosts_and_sites_are_read(tmp_path, capsys):
    path = tmp_path / "table.csv"
    invented_table().to_csv(path, index=False)
    assert main(["check", str(path)]) == 0
    output = capsys.readouterr().out
    assert "no problems found" in output
    assert "MgO   Mg 1 + O 1" in output
    assert "sub_Mg    Mg (named in the label)" in output
    assert "int_oct   composition mix Mg 0.50, O 0.50 (no single host element named)" in output
    assert "case-sensitively" in output
    assert "suspect values: none" in output


def test_check_takes_the_host_file_fit_takes(tmp_path, capsys):
    path = tmp_path / "table.csv"
    invented_table(host="periclase").to_csv(path, index=False)
    assert main(["check", str(path)]) == 2
    error = capsys.readouterr().err
    assert f"{path}:2: host 'periclase' is not a chemical formula" in error
    assert "--hosts HOST_FILE" in error and len(error.strip().splitlines()) == 1
    hosts = tmp_path / "hosts.csv"
    hosts.write_text("host,formula\npericlase,MgO\n", encoding="utf-8")
    assert main(["check", str(path), "--hosts", str(hosts)]) == 0
    output = capsys.readouterr().out
    assert "periclase   Mg 1 + O 1  (from the host file)" in output
    assert "sub_Mg    Mg (named in the label)" in output


def test_check_lists_suspect_values_and_fails(tmp_path, capsys):
    table = invented_table()
    table.loc[4, "value"] = table.loc[4, "value"] * 1000
    path = tmp_path / "table.csv"
    table.to_csv(path, index=False)
    assert main(["check", str(path)]) == 2
    captured = capsys.readouterr()
    assert "no problems found" not in captured.out
    assert f"{path}:6: B at MgO/sub_Mg/gga/E_sol" in captured.out and "likely written in meV" in captured.out
    assert "--suspect-values warn" in captured.err and len(captured.err.strip().splitlines()) == 1


def test_fit_refuses_suspect_values_before_any_work_or_keeps_them_loudly(tmp_path, capsys):
    table = invented_table()
    table.loc[4, "value"] = -table.loc[4, "value"]
    path = tmp_path / "table.csv"
    table.to_csv(path, index=False)
    assert main(["fit", str(path), "--out", str(tmp_path / "refused"), "--learner", "gp"]) == 2
    error = capsys.readouterr().err
    assert f"{path}:6:" in error and "likely a flipped sign" in error and "--suspect-values warn" in error
    assert not (tmp_path / "refused").exists()
    status = main(["fit", str(path), "--out", str(tmp_path / "kept"), "--learner", "gp", "--quiet",
                   "--suspect-values", "warn"])
    assert status == 0
    error = capsys.readouterr().err
    assert "WARNING: suspect value kept (--suspect-values warn)" in error and "flipped sign" in error


def test_check_shows_control_characters_escaped(tmp_path, capsys):
    path = tmp_path / "table.csv"
    table = invented_table()
    table["site"] = table["site"].replace({"int_oct": "int\x1b[2J_oct"})
    table.to_csv(path, index=False)
    assert main(["check", str(path)]) == 0
    output = capsys.readouterr().out
    assert "\x1b" not in output
    assert "int\\x1b[2J_oct" in output


def test_fill_refuses_to_write_over_the_table_it_learned(model, capsys):
    before = model["table"].read_bytes()
    assert main(["fill", str(model["model"]), "--out", str(model["table"])]) == 2
    assert "is the table the model was fitted on" in capsys.readouterr().err
    sites = model["folder"] / "out" / "sites.csv"
    assert main(["fill", str(model["model"]), "--out", str(model["folder"] / "out" / "filled.csv"),
                 "--sites-out", str(model["table"])]) == 2
    assert "--sites-out" in capsys.readouterr().err
    assert model["table"].read_bytes() == before
    assert not sites.exists()


def test_fill_says_when_it_replaces_a_site_preference_file(model, capsys):
    out = model["folder"] / "filled" / "filled.csv"
    assert main(["fill", str(model["model"]), "--out", str(out)]) == 0
    assert "replacing" not in capsys.readouterr().out
    assert main(["fill", str(model["model"]), "--out", str(out)]) == 0
    assert f"note: replacing the existing {out.with_name('site_preference.csv')}" in capsys.readouterr().out
    assert main(["fill", str(model["model"]), "--out", str(out), "--sites-out", str(out)]) == 2
    assert "give --sites-out another name" in capsys.readouterr().err
