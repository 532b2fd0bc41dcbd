"""The package's jobs equal the command line's outputs on the demo data, file by file and byte
by byte (the command line is the reference: the package must add nothing and lose nothing)."""

from __future__ import annotations

import pandas as pd
import polars as pl
import pytest

import valuedrift as vd
from conftest import DEMO_DESIGN, DEMO_TRIALS, ROOT, run_cli, same_csv_files

MODEL = "gainloss-linear"


@pytest.fixture(scope="module")
def cli_fit(tmp_path_factory, cli_binary):
    out = tmp_path_factory.mktemp("cli") / "fit"
    run_cli("fit", "--data", DEMO_TRIALS, "--model", MODEL, "--out", out, "--threads", 2)
    return out


@pytest.fixture(scope="module")
def package_fit():
    return vd.fit(pd.read_csv(DEMO_TRIALS), MODEL, threads=2, progress=False)


def test_fit_from_pandas_equals_the_command_line(cli_fit, package_fit):
    names = same_csv_files(package_fit.folder, cli_fit)
    assert "parameters.csv" in names and "fit_summary.csv" in names
    # The frames are the Parquet twins the command wrote.
    assert list(package_fit.parameters.columns) == pd.read_csv(cli_fit / "parameters.csv").columns.tolist()
    assert package_fit.summary["subject"].nunique() == 40


def test_fit_from_polars_and_with_the_model_as_text_equals_the_command_line(cli_fit, tmp_path):
    text = (ROOT / "models" / f"{MODEL}.toml").read_text()
    result = vd.fit(pl.read_csv(DEMO_TRIALS), text, out=tmp_path / "fit", threads=2, progress=False)
    assert isinstance(result.parameters, pl.DataFrame)
    same_csv_files(tmp_path / "fit", cli_fit, ["parameters.csv", "estimates_wide.csv", "data_screen.csv"])


def test_hierarchical_fit_by_group_equals_the_command_line(tmp_path):
    trials = pd.read_csv(DEMO_TRIALS)
    keep = sorted(trials["subject"].unique())
    keep = keep[:4] + keep[-4:]  # four of each cohort
    subset = trials[trials["subject"].isin(keep)]
    data = tmp_path / "subset.csv"
    subset.to_csv(data, index=False)
    run_cli("fit", "--data", data, "--model", MODEL, "--out", tmp_path / "cli", "--threads", 2,
            "--hierarchical", "--by", "group")
    ours = vd.fit(subset, MODEL, hierarchical=True, by="group", threads=2, progress=False)
    names = same_csv_files(ours.folder, tmp_path / "cli")
    assert "eb_parameters.csv" in names and "eb_group_priors.csv" in names


def test_compare_contrast_check_and_export_equal_the_command_line(cli_fit, tmp_path):
    run_cli("fit", "--data", DEMO_TRIALS, "--model", f"{MODEL},gainloss-quadratic", "--out",
            tmp_path / "cli", "--threads", 2)
    fitted = vd.fit(pd.read_csv(DEMO_TRIALS), [MODEL, "gainloss-quadratic"], threads=2, progress=False)
    same_csv_files(fitted.folder, tmp_path / "cli")

    run_cli("compare", "--fits", tmp_path / "cli", "--out", tmp_path / "cli-compare", "--samples", 20000)
    compared = vd.compare(fitted, samples=20000, progress=False)
    assert "model_selection" in compared
    same_csv_files(compared.folder, tmp_path / "cli-compare")

    run_cli("contrast", "--fits", tmp_path / "cli", "--model", MODEL, "--out", tmp_path / "cli-contrast")
    contrasted = vd.contrast(fitted, MODEL, progress=False)
    assert "contrast" in contrasted
    same_csv_files(contrasted.folder, tmp_path / "cli-contrast")

    run_cli("check", "--fits", tmp_path / "cli", "--data", DEMO_TRIALS, "--model", MODEL,
            "--out", tmp_path / "cli-check", "--sims", 10)
    checked = vd.check(fitted, MODEL, sims=10, progress=False)
    assert "check_misfit" in checked
    same_csv_files(checked.folder, tmp_path / "cli-check")

    run_cli("export", "--fits", tmp_path / "cli", "--data", DEMO_TRIALS, "--model", MODEL,
            "--out", tmp_path / "cli-export")
    exported = vd.export(fitted, MODEL, progress=False)
    assert len(exported["latents"]) == 9600
    same_csv_files(exported.folder, tmp_path / "cli-export")


def test_simulate_equals_the_command_line(tmp_path):
    design = pd.read_csv(DEMO_DESIGN)
    design = design[design["subject"].isin(design["subject"].unique()[:2])]
    params = pd.DataFrame({
        "subject": design["subject"].unique(), "gain_rate": [0.3, 0.5], "loss_rate": [0.4, 0.2],
        "effort_weight": [0.8, 1.2], "value_scale": [4.0, 5.5], "boundary": [1.6, 2.0],
        "ndt": [0.3, 0.25],
    })
    params.to_csv(tmp_path / "params.csv", index=False)
    design.to_csv(tmp_path / "design.csv", index=False)
    run_cli("simulate", "--model", MODEL, "--params", tmp_path / "params.csv", "--design",
            tmp_path / "design.csv", "--out", tmp_path / "cli.parquet", "--seed", 3)
    ours = vd.simulate(MODEL, params, design, seed=3, frame="polars", progress=False)
    theirs = pl.read_parquet(tmp_path / "cli.parquet")
    assert ours.equals(theirs) and len(ours) == len(design)


def test_plan_equals_the_command_line(tmp_path):
    text = f"""
design = "{DEMO_DESIGN}"
models = ["{MODEL}"]
participants = [4]
trials = [40]
studies = 2
seed = 1
groups = ["steady", "effort-averse"]

[difference]
parameter = "effort_weight"
shift = 0.5

[population]
gain_rate = {{ uniform = [0.1, 0.7] }}
loss_rate = {{ uniform = [0.1, 0.7] }}
effort_weight = {{ normal = {{ mean = 0.8, sd = 0.3 }} }}
value_scale = {{ uniform = [2.0, 8.0] }}
boundary = {{ uniform = [1.0, 2.5] }}
ndt = {{ uniform = [0.2, 0.5] }}
"""
    (tmp_path / "plan.toml").write_text(text)
    run_cli("plan", "--plan", tmp_path / "plan.toml", "--out", tmp_path / "cli", "--threads", 2)
    ours = vd.plan(text, threads=2, progress=False)
    assert "plan_recovery" in ours
    same_csv_files(ours.folder, tmp_path / "cli")


def test_models_list_the_built_in_models_as_the_command_line_does(cli_binary):
    table = vd.models()
    listed = run_cli("models").stdout
    for name in table["model"].unique():
        assert f"{name}  (built-in" in listed
    assert MODEL in set(table["model"])
    assert vd.describe_model(MODEL) == run_cli("models", MODEL).stdout
    text = (ROOT / "models" / f"{MODEL}.toml").read_text()
    assert vd.models(text)["parameter"].tolist() == table[table["model"] == MODEL]["parameter"].tolist()


def test_check_of_a_fit_folder_given_by_path_equals_the_command_line(cli_fit, tmp_path):
    run_cli("check", "--fits", cli_fit, "--data", DEMO_TRIALS, "--model", MODEL, "--out",
            tmp_path / "cli", "--sims", 10)
    ours = vd.check(cli_fit, MODEL, trials=pl.read_csv(DEMO_TRIALS), sims=10, progress=False)
    assert isinstance(ours["check_misfit"], pl.DataFrame)
    same_csv_files(ours.folder, tmp_path / "cli")


def test_report_equals_the_command_line(cli_fit, tmp_path):
    run_cli("report", "--fits", cli_fit, "--out", tmp_path / "cli.html")
    ours = vd.report(cli_fit, progress=False)
    assert ours.startswith("<!DOCTYPE html>") or ours.lower().startswith("<!doctype html>")
    assert ours == (tmp_path / "cli.html").read_text(encoding="utf-8")
