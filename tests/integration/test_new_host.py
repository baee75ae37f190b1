"""A host with no rows, and one with a few: fill --hosts-new, the new-host scenario and
its calibration, on the third INVENTED world (a family of rock-salt hosts whose host term
follows host descriptors; ``world.invent_host_family``)."""

import numpy as np
import pandas as pd
import pytest

from dopantgap.baselines import other_hosts_baseline
from dopantgap.errors import DopantgapError
from dopantgap.fill import fill_table
from dopantgap.new_hosts import parse_host_list, plan_new_hosts
from dopantgap.surrogate import Surrogate
from dopantgap.table import KEY_COLUMNS
from dopantgap.surrogate.stages import new_host_form
from dopantgap.world import FAMILY_SITE_KINDS, family_host_file_text, invent_host_family

HOSTS = {
    "MgO": ("sub_Mg", "sub_O", "int_oct"),
    "CaO": ("sub_Ca", "sub_O", "int_oct"),
    "SrO": ("sub_Sr", "sub_O", "int_oct"),
    "MgS": ("sub_Mg", "sub_S", "int_oct"),
    "CaS": ("sub_Ca", "sub_S", "int_oct"),
    "SrS": ("sub_Sr", "sub_S", "int_oct"),
}
NEW = "SrO"
ELEMENTS = tuple("Li Na K Be Mg Ca Ba Al Ga In Sc Y Ti Zr Fe Co Ni Cu Zn Cd Sn Pb Bi La".split())


@pytest.fixture(scope="module")
def family():
    """The INVENTED family at the cheap level, SrO left out of the table."""
    world = invent_host_family(element_symbols=ELEMENTS, hosts=HOSTS, methods=("gga", "hyb"), seed=3)
    world = world[world["method"] == "gga"].reset_index(drop=True)
    table = world[world["host"] != NEW].drop(columns="truth").reset_index(drop=True)
    kinds = {key: kind for key, kind in FAMILY_SITE_KINDS.items() if key[0] in HOSTS}
    model = Surrogate(learner="gp", site_kinds=kinds, random_state=0).fit(table)
    return world, table, model


@pytest.fixture(scope="module")
def host_file(tmp_path_factory, family):
    path = tmp_path_factory.mktemp("hosts") / "hosts.csv"
    path.write_text(family_host_file_text(HOSTS))
    return path


def _new_host_cells(world):
    return world[world["host"] == NEW].reset_index(drop=True)


def test_the_host_loop_calibrates_a_new_host_scenario(family):
    _world, _table, model = family
    assert model.new_host_ready()
    residuals = model.cv_residuals_
    held = residuals[residuals["scenario"] == "new-host"]
    # every cell of the five hosts is hidden once, whole hosts at a time
    assert len(held) == len(model.table_)
    assert not held.duplicated(list(KEY_COLUMNS)).any()
    assert held.groupby("fold")["host"].nunique().max() == 1
    # then each host is given back five cells and its others predicted (a quantity none
    # of the five has stays new-host, predicted once above)
    sparse = residuals[residuals["scenario"] == "sparse-host"]
    assert not sparse.duplicated(list(KEY_COLUMNS)).any()
    assert len(model.table_) / 2 < len(sparse) <= len(model.table_) - 5 * model.table_["host"].nunique()


def test_leaving_one_host_out_beats_the_impurity_mean_over_other_hosts(family, host_file):
    """On a world with a known host term the model places a host it never saw closer
    than the rule 'the impurity does what it does on average elsewhere'."""
    world, table, model = family
    plan = plan_new_hosts(model, [NEW], host_file)
    filled = fill_table(model, new_hosts=plan)
    truth = _new_host_cells(world)
    merged = truth.merge(filled, on=list(KEY_COLUMNS), suffixes=("_true", ""))
    assert len(merged) == len(truth)
    assert set(merged["scenario"]) == {"new-host"}
    model_error = np.mean(np.abs(merged["value"] - merged["truth"]))
    rule = other_hosts_baseline(table, truth[list(KEY_COLUMNS)], site_kinds=FAMILY_SITE_KINDS)
    rule_error = np.mean(np.abs(rule - truth["truth"].to_numpy()))
    assert model_error < rule_error
    covered = np.mean((merged["truth"] >= merged["lo"]) & (merged["truth"] <= merged["hi"]))
    assert covered >= 0.8


def test_a_new_host_interval_is_wider_and_narrows_as_rows_arrive(family, host_file):
    world, table, model = family
    element, site = "Ti", "int_oct"
    cell = pd.DataFrame([{"element": element, "host": NEW, "site": site, "method": "gga", "quantity": "E_sol"}])
    known = cell.assign(host="CaO")
    # Ti's cell in CaO hidden too, so both are predicted
    table = table[~((table["element"] == element) & (table["site"] == site))].reset_index(drop=True)
    model = model.refreshed(table)
    plan = plan_new_hosts(model, [NEW], host_file)
    width = {0: float(np.ptp(plan.surrogate.predict(cell)[["lo", "hi"]].to_numpy()))}
    known_width = float(np.ptp(model.predict(known)[["lo", "hi"]].to_numpy()))
    assert width[0] > known_width
    rows = _new_host_cells(world)
    rows = rows[~((rows["element"] == element) & (rows["site"] == site))].sample(frac=1.0, random_state=0)
    for count in (1, 5, 10):
        grown = model.refreshed(pd.concat([table, rows.iloc[:count].drop(columns="truth")], ignore_index=True))
        width[count] = float(np.ptp(grown.predict(cell)[["lo", "hi"]].to_numpy()))
    assert width[0] > width[1] > width[5] > width[10]


def test_a_site_naming_a_host_atom_is_not_carried_over_unasked(family):
    _world, _table, model = family
    plan = plan_new_hosts(model, [NEW])
    assert set(plan.columns["site"]) == {"int_oct"}
    assert any("name host atoms" in note for note in plan.notes)


def test_new_host_refusals_are_one_line(family, tmp_path):
    _world, _table, model = family
    with pytest.raises(DopantgapError, match="already has computed cells"):
        plan_new_hosts(model, ["MgO"])
    with pytest.raises(DopantgapError, match="host labels separated by commas"):
        parse_host_list("SrO,,CaS")
    odd = tmp_path / "odd.csv"
    odd.write_text("host,formula,site,site_kind\nSrO,SrO,sub_Sr,cation_like\n")
    with pytest.raises(DopantgapError, match="no site of the table is of kind 'cation_like'"):
        plan_new_hosts(model, [NEW], odd)


def test_two_hosts_cannot_place_a_third():
    world = invent_host_family(element_symbols=ELEMENTS[:10], hosts={k: HOSTS[k] for k in ("MgO", "CaO")}, seed=1)
    table = world[world["method"] == "gga"].drop(columns="truth")
    model = Surrogate(learner="gp").fit(table)
    assert not model.new_host_ready()
    with pytest.raises(DopantgapError, match="needs at least 3"):
        plan_new_hosts(model, ["SrO"])


def test_next_names_the_first_calculations_in_a_new_host(family, host_file):
    from dopantgap.picker import pick_next

    _world, _table, model = family
    plan = plan_new_hosts(model, [NEW], host_file)
    picks = pick_next(model, count=5, host=NEW, new_hosts=plan)
    assert len(picks) == 5
    assert set(picks["host"]) == {NEW} and set(picks["scenario"]) == {"new-host"}
    # a batch: each pick is worth less once the ones above it are known
    assert (np.diff(picks["benefit"].to_numpy()) <= 1e-12).all()
    assert len(picks[["element", "site"]].drop_duplicates()) == 5


def test_fill_and_next_commands_take_a_new_host(family, host_file, tmp_path, capsys):
    from dopantgap.cli import main
    from dopantgap.store import save_model

    _world, _table, model = family
    folder = tmp_path / "model"
    save_model(model, folder)
    out = tmp_path / "filled.csv"
    assert main(["fill", str(folder), "--out", str(out), "--hosts-new", NEW, "--hosts", str(host_file), "--quiet"]) == 0
    filled = pd.read_csv(out)
    new = filled[filled["host"] == NEW]
    assert len(new) == len(ELEMENTS) * 4  # three sites, and the binding energy on the cation site
    assert set(new["scenario"]) == {"new-host"} and set(new["status"]) == {"predicted"}
    preference = pd.read_csv(tmp_path / "site_preference.csv")
    assert NEW in set(preference["host"])
    picks = tmp_path / "next.csv"
    assert main(["next", str(folder), "--out", str(picks), "--host", NEW, "--hosts", str(host_file),
                 "--count", "3", "--quiet"]) == 0
    assert set(pd.read_csv(picks)["host"]) == {NEW}
    # a host file without --hosts-new is a mistake said in one line
    assert main(["fill", str(folder), "--out", str(out), "--hosts", str(host_file), "--quiet"]) == 2
    said = capsys.readouterr().err.strip().splitlines()
    assert said == ["dopantgap fill: --hosts describes new hosts; name them with --hosts-new (e.g. --hosts-new MgO,CaO)."]


@pytest.mark.parametrize("form", ["rule", "pairs"])
def test_a_refreshed_model_keeps_the_host_loops_choice(family, form):
    _world, table, model = family
    kept = {key: stage.new_host_form for key, stage in model.stages_.items()}
    for stage in model.stages_.values():
        assert stage.pairs is not None  # eight hosts: every stage has a pair model
        stage.new_host_form = form
    try:
        grown = model.refreshed(table)
        assert {new_host_form(stage) for stage in grown.stages_.values()} == {form}
    finally:
        for key, stage in model.stages_.items():
            stage.new_host_form = kept[key]


def test_the_pair_form_places_a_new_host_by_the_pair_model(family, host_file):
    # the form is read in one place (stages.stage_joint): with "pairs" kept, a new host's
    # cells at a direct stage take the pair model's mean, and known hosts keep the learner's
    _world, table, model = family
    kept = {key: stage.new_host_form for key, stage in model.stages_.items()}
    for stage in model.stages_.values():
        stage.new_host_form = "pairs"
    try:
        plan = plan_new_hosts(model, [NEW], host_file)
        filled = fill_table(plan.surrogate, new_hosts=plan)
        lowest = {quantity: levels[0] for quantity, levels in model.quantity_levels_.items()}
        checked = 0
        for (quantity, method), stage in plan.surrogate.stages_.items():
            if method != lowest[quantity]:
                continue
            here = filled[(filled["quantity"] == quantity) & (filled["method"] == method)
                          & (filled["status"] == "predicted")]
            new = here[here["host"] == NEW].reset_index(drop=True)
            encoder, learner = stage.pairs
            np.testing.assert_allclose(new["value"], learner.predict(encoder.transform(new)), atol=1e-9)
            old = here[here["host"] != NEW].reset_index(drop=True)
            if len(old):
                by_learner = stage.learner.predict(stage.encoder.transform(old))
                np.testing.assert_allclose(old["value"], by_learner, atol=1e-9)
            checked += len(new)
        assert checked > 0
    finally:
        for key, stage in model.stages_.items():
            stage.new_host_form = kept[key]


# Rock-salt lattice constants in angstrom, values from memory; they only need to differ
# between hosts for the pair model to read them.
LATTICE = {"MgO": 4.21, "CaO": 4.81, "SrO": 5.16, "MgS": 5.20, "CaS": 5.69, "SrS": 6.02}


def test_the_pair_form_with_host_properties_reads_the_host_file(family, tmp_path):
    # a model whose host file gives a property has a second pair model that reads it
    # (the host loop's fourth form); with that form kept, a new host's cells take its
    # mean, and a refreshed model keeps the form
    from dopantgap.hosts import read_host_properties

    _world, table, model = family
    lines = family_host_file_text(HOSTS).splitlines()
    path = tmp_path / "hosts_with_lattice.csv"
    path.write_text("\n".join(
        [lines[0] + ",lattice_constant [angstrom]"] + [f"{line},{LATTICE[line.split(',')[0]]}" for line in lines[1:]]
    ) + "\n")
    described = model.refreshed(table)
    described.host_properties = read_host_properties(path)
    described = described.refreshed(table)
    lowest = {quantity: levels[0] for quantity, levels in model.quantity_levels_.items()}
    for stage in described.stages_.values():
        encoder, _learner = stage.pairs_properties
        assert encoder.property_names_ == ["host_lattice_constant"]
        stage.new_host_form = "pairs_properties"
    assert {new_host_form(stage) for stage in described.refreshed(table).stages_.values()} == {"pairs_properties"}
    plan = plan_new_hosts(described, [NEW], path)
    filled = fill_table(plan.surrogate, new_hosts=plan)
    checked = 0
    for (quantity, method), stage in plan.surrogate.stages_.items():
        if method != lowest[quantity]:
            continue
        new = filled[(filled["quantity"] == quantity) & (filled["method"] == method)
                     & (filled["host"] == NEW) & (filled["status"] == "predicted")].reset_index(drop=True)
        encoder, learner = stage.pairs_properties
        np.testing.assert_allclose(new["value"], learner.predict(encoder.transform(new)), atol=1e-9)
        without, _ = stage.pairs
        assert not np.allclose(new["value"], stage.pairs[1].predict(without.transform(new)))
        checked += len(new)
    assert checked > 0


def test_fill_says_a_new_hosts_caution_once(family, tmp_path, capsys):
    # caesium iodide is unlike every oxide and sulfide of the table: it lies outside the
    # table's hosts. The caution is said once for the host, not once more per impurity
    # (every one of its cells carries it in the file's caution column)
    from dopantgap.cli import main
    from dopantgap.store import save_model

    _world, _table, model = family
    outside = "CsI"
    path = tmp_path / "hosts.csv"
    path.write_text("host,formula,site,site_kind\nCsI,CsI,sub_Cs,sub_cation\nCsI,CsI,sub_I,sub_anion\n"
                    "CsI,CsI,int_oct,int_oct\n")
    assert outside in plan_new_hosts(model, [outside], path).outside
    folder = tmp_path / "model"
    save_model(model, folder)
    out = tmp_path / "filled.csv"
    assert main(["fill", str(folder), "--out", str(out), "--hosts-new", outside, "--hosts", str(path)]) == 0
    said = capsys.readouterr()
    lines = (said.out + said.err).splitlines()
    assert sum(f"host {outside} lies outside the table's hosts" in line for line in lines) == 1
    filled = pd.read_csv(out, keep_default_na=False)
    new = filled[filled["host"] == outside]
    assert new["caution"].str.contains(f"host {outside} lies outside").all()
