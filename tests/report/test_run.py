"""`cohort run` end to end on a small invented cohort: outputs, atomicity, reproducibility,
and the report in a real browser (headless Chromium).
"""

from __future__ import annotations

import hashlib
import io
import json
import re
import shutil
from pathlib import Path

import pandas as pd
import pytest

from cohort.analysis.pipeline import options_from_study
from cohort.cli import main
from cohort.demo import write_demo
from cohort.io.study import load_study
from cohort.parallel import resolve_workers
from cohort.report.destination import OutputExistsError
from cohort.report.runner import run

B = 60  # resamples: enough to exercise the bootstrap, small enough for a fast suite


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    base = tmp_path_factory.mktemp("run")
    study_file = write_demo(base / "demo", n_subjects=15)
    study = load_study(study_file)
    summary = run(study, base / "out", options_from_study(study, n_boot=B))
    return study_file, summary


def digest_tables(folder: Path) -> dict[str, str]:
    return {
        p.name: hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted((folder / "tables").glob("*.csv"))
    }


def test_run_writes_every_output(demo_run):
    _, summary = demo_run
    out = summary.out
    for name in ("report.html", "methods.md", "manifest.json", "tables.xlsx"):
        assert (out / name).stat().st_size > 0, name
    for table in ("agreement", "findings_agreement", "missed_findings", "thresholds", "exclusions"):
        assert (out / "tables" / f"{table}.csv").exists(), table
    sheets = pd.read_excel(out / "tables.xlsx", sheet_name=None)
    assert set(sheets) == {p.stem[:31] for p in (out / "tables").glob("*.csv")}
    pngs = list((out / "figures").glob("*.png"))
    assert pngs and all(p.with_suffix(".svg").exists() for p in pngs)
    assert not [p for p in out.parent.iterdir() if "partial" in p.name]  # staging folder gone


def test_a_run_leaves_its_inputs_unchanged(tmp_path):
    study_file = write_demo(tmp_path / "demo", n_subjects=6)
    files = sorted(study_file.parent.iterdir())
    before = [hashlib.sha256(p.read_bytes()).hexdigest() for p in files]
    run(
        study_file,
        tmp_path / "out",
        options_from_study(load_study(study_file), n_boot=0, figures=False),
    )
    assert [hashlib.sha256(p.read_bytes()).hexdigest() for p in files] == before
    assert sorted(study_file.parent.iterdir()) == files


def test_manifest_records_inputs_settings_and_versions(demo_run):
    study_file, summary = demo_run
    manifest = json.loads((summary.out / "manifest.json").read_text())
    values = study_file.parent / "values.csv"
    assert manifest["inputs"]["values"]["sha256"] == hashlib.sha256(values.read_bytes()).hexdigest()
    assert manifest["options"]["n_boot"] == B and manifest["options"]["seed"] == 20261202
    assert manifest["packages"]["numpy"] and manifest["settings"]["reference"] == "reference-fit"
    options = manifest["options"]
    assert options["workers_used"] == resolve_workers(options["workers"]) >= 1
    acc = manifest["record_accounting"]
    assert acc["records_in"] == acc["used"] + acc["missing"] + acc["excluded"]


def test_methods_text_states_what_ran(demo_run):
    _, summary = demo_run
    text = (summary.out / "methods.md").read_text()
    assert f"B = {B}" in text and "seed 20261202" in text
    assert "Bland" in text and "Lin" in text and "Wilson" in text
    assert "50 1/s at 1.5 T" in text and "79 1/s at 3 T (derived)" in text


def test_methods_text_without_bootstrap_and_at_another_level_says_so(demo_run):
    """B = 0 runs no bootstrap: the text must not claim percentile bootstrap intervals; a
    level of 0.975 is 97.5 %, never rounded to a level not used."""
    from cohort.analysis.pipeline import analyse
    from cohort.report.methods_text import methods_markdown

    study = load_study(demo_run[0])
    options = options_from_study(study, n_boot=0, figures=False, confidence_level=0.975)
    text = methods_markdown(analyse(study, options))
    assert "No cluster bootstrap was run (B = 0)" in text and "97.5% confidence" in text
    assert "percentile intervals of a subject-level cluster bootstrap" not in text
    assert "98%" not in text


def test_rerun_with_the_same_seed_reproduces_every_table(demo_run, tmp_path):
    study_file, summary = demo_run
    study = load_study(study_file)
    again = run(study, tmp_path / "again", options_from_study(study, n_boot=B, figures=False))
    assert digest_tables(again.out) == digest_tables(summary.out)


def test_another_seed_changes_only_bootstrap_intervals(demo_run, tmp_path):
    study_file, summary = demo_run
    study = load_study(study_file)
    other = run(
        study, tmp_path / "other", options_from_study(study, n_boot=B, seed=7, figures=False)
    )
    a = pd.read_csv(summary.out / "tables" / "agreement.csv")
    b = pd.read_csv(other.out / "tables" / "agreement.csv")
    point = [
        "bias",
        "loa_low",
        "loa_high",
        "ccc",
        "icc",
        "pearson_r",
        "rm_corr",
        "bias_analytic_ci_low",
    ]
    pd.testing.assert_frame_equal(a[point], b[point])
    assert not a["bias_ci_low"].equals(b["bias_ci_low"])


def test_refuses_a_folder_holding_other_files_even_with_force(demo_run, tmp_path):
    # the user's files are never deleted: --force replaces only an earlier cohort output
    # (tests/test_destination.py covers every case)
    study_file, _ = demo_run
    out = tmp_path / "busy"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    with pytest.raises(OutputExistsError, match="did not write"):
        run(study_file, out, options_from_study(load_study(study_file), n_boot=0, figures=False))
    for force in ([], ["--force"]):
        args = ["--out", str(out), "--bootstrap", "0", "--no-figures", "--quiet", *force]
        code = main(["run", str(study_file), *args])
        assert code == 2
        assert [p.name for p in out.iterdir()] == ["keep.txt"]
        assert (out / "keep.txt").read_text() == "mine"


def test_an_interrupted_run_leaves_no_half_report(demo_run, tmp_path, monkeypatch):
    study_file, _ = demo_run
    import cohort.report.runner as runner

    def boom(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(runner, "render_report", boom)
    with pytest.raises(KeyboardInterrupt):
        run(
            study_file,
            tmp_path / "never",
            options_from_study(load_study(study_file), n_boot=0, figures=False),
        )
    assert list(tmp_path.iterdir()) == []


def test_cli_run_prints_a_summary_with_the_report_path(demo_run, tmp_path, capsys):
    study_file, _ = demo_run
    code = main(
        ["run", str(study_file), "--out", str(tmp_path / "r"), "--bootstrap", "20", "--no-figures"]
    )
    captured = capsys.readouterr()
    assert code == 0
    assert str(tmp_path / "r" / "report.html") in captured.out
    assert "[cohort] agreement statistics" in captured.err  # progress on stderr
    code = main(
        [
            "run",
            str(study_file),
            "--out",
            str(tmp_path / "q"),
            "--bootstrap",
            "20",
            "--no-figures",
            "--quiet",
        ]
    )
    assert code == 0 and capsys.readouterr().err == ""


def test_report_escapes_user_text(tmp_path):
    study_file = write_demo(tmp_path / "demo", n_subjects=6)
    values = pd.read_csv(study_file.parent / "values.csv", dtype=str, keep_default_na=False)
    hostile = "<script>alert('x')</script>"
    values["method"] = values["method"].replace({"quickmap": hostile})
    values.to_csv(study_file.parent / "values.csv", index=False)
    text = study_file.read_text(encoding="utf-8")  # the study file names the method too
    study_file.write_text(
        text.replace('"quickmap"', f'"{hostile}"').replace("quickmap =", f'"{hostile}" ='),
        encoding="utf-8",
    )
    run(
        study_file,
        tmp_path / "out",
        options_from_study(load_study(study_file), n_boot=0, figures=False),
    )
    html = (tmp_path / "out" / "report.html").read_text()
    assert "<script>" not in html
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt;" in html


# --- the report in a real browser ---------------------------------------------------------


def browser():
    chromium = shutil.which("chromium") or shutil.which("chromium-browser")
    driver_path = shutil.which("chromedriver")
    if not chromium or not driver_path:
        pytest.skip("no Chromium/ChromeDriver on this machine (.ci/run installs Debian's packages)")
    webdriver = pytest.importorskip("selenium.webdriver")
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = chromium
    for flag in (
        "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        "--window-size=1200,1600",
    ):  # fmt: skip
        options.add_argument(flag)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    return webdriver.Chrome(service=Service(driver_path), options=options)


def test_report_renders_in_headless_chromium(demo_run, tmp_path):
    _, summary = demo_run
    driver = browser()
    try:
        driver.get(summary.report.as_uri())
        images = driver.execute_script(
            "return Array.from(document.images).map(i => [i.complete, i.naturalWidth]);"
        )
        assert images and all(done and width > 0 for done, width in images)
        errors = [e for e in driver.get_log("browser") if e["level"] == "SEVERE"]
        assert errors == []
        title = driver.execute_script("return document.querySelector('h1').textContent;")
        assert "Harbour Valley" in title
        png = driver.get_screenshot_as_png()
    finally:
        driver.quit()
    from PIL import Image

    image = Image.open(io.BytesIO(png)).convert("L")
    low, high = image.getextrema()
    assert high - low > 100  # not a blank page
    image.save(tmp_path / "report.png")


def test_every_output_column_is_documented_in_the_readme(demo_run):
    _, summary = demo_run
    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    undocumented = []
    for path in sorted((summary.out / "tables").glob("*.csv")):
        if f"`{path.stem}`" not in readme:
            undocumented.append(path.stem)
        for column in pd.read_csv(path, nrows=0).columns:
            base = column
            for suffix in (
                "_analytic_ci_low",
                "_analytic_ci_high",
                "_cluster_ci_low",
                "_cluster_ci_high",
                "_ci_low",
                "_ci_high",
            ):
                if column.endswith(suffix) and column != suffix.lstrip("_"):
                    base = column[: -len(suffix)]
                    break
            words = {column, base}
            if not any(re.search(rf"(?<![\w-]){re.escape(w)}(?![\w-])", readme) for w in words):
                undocumented.append(f"{path.stem}.{column}")
    assert undocumented == []
