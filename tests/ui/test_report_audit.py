"""``forcelens report`` and ``forcelens audit`` on runs recorded in-process (invented data)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from daq.programme import parse_programme
from estimator.profile import default_demo_profile
from ui.cli import main
from ui.pipeline import EstimationPipeline
from ui.recording import open_recording
from ui.wiring import scaling_for, simulated_cell_for

PROFILE = default_demo_profile()


def _record(root: Path) -> Path:
    """2 s of an invented 0 → 30 → 0 N programme, recorded like forcelens live does."""
    programme = parse_programme("hold 0.6 0; hold 0.8 30; hold 0.6 0")
    run = simulated_cell_for(PROFILE, seed=6).generate(programme)
    samples = run.sample_block(scaling_for(PROFILE))
    rec = open_recording(root, PROFILE, note="report test (invented data)")
    pipe = EstimationPipeline(PROFILE, recorder=rec.writer)
    for i in range(0, samples.size, 113):
        pipe.process(samples[i : i + 113])
    rec.close("complete", {"samples": int(samples.size)})
    return rec.folder


def test_report_is_self_contained_and_an_untouched_run_audits_identical(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    folder = _record(tmp_path / "runs")
    assert main(["report", str(folder)]) == 0
    out = folder.parent / f"{folder.name}-report"
    page = (out / "report.html").read_text()
    assert "<svg" in page and "<img" not in page  # figures inline, nothing to fetch
    assert "U = 2u_c (k = 2" in page and "forcelens report" in page and "Caution" not in page
    assert "Force testing can hurt people" in page
    assert "expanded U (k = 2, about 95 %)" in page  # the GUM budget of a settled reading
    figures = json.loads((out / "figures.json").read_text())
    assert len(figures["changes"]) == 2 and figures["changes"][0]["after_n"] == pytest.approx(
        30.0, rel=0.01
    )
    assert (out / "report.pdf").read_bytes()[:5] == b"%PDF-"
    # readings as GUM 7.2.6 advises: U to two significant digits, the value to its decimal
    import re

    quoted = re.findall(r"<li>(-?\d+(?:\.(\d+))?) N ± (\d+(?:\.(\d+))?) N \(U", page)
    assert len(quoted) == 2, quoted
    for _value, value_decimals, u, u_decimals in quoted:
        assert len(value_decimals) == len(u_decimals)  # the same decimal place
        assert len(u.replace(".", "").lstrip("0")) == 2  # two significant digits
    # the summary comes before any long table, the table of every change last
    assert (
        page.index("<h2>Summary")
        < page.index("<h2>Displacement")
        < page.index("<h2>Every load change")
    )
    assert page.count("<h2>") == page[: page.index("<h2>Every load change")].count("<h2>") + 1
    capsys.readouterr()
    assert main(["audit", str(folder)]) == 0
    text = capsys.readouterr().out
    assert "identical" in text and "report figures" in text


def test_audit_names_an_altered_sample(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    folder = _record(tmp_path / "runs")
    assert main(["report", str(folder)]) == 0
    path = folder / "samples.bin"
    data = bytearray(path.read_bytes())
    data[44 * 500 + 36] ^= 0x10  # displacement_m of sample 500 (offset 36 in the record)
    path.write_bytes(bytes(data))
    capsys.readouterr()
    assert main(["audit", str(folder)]) == 1
    text = capsys.readouterr().out
    assert "a sample was altered after the run was closed" in text
    assert "the samples differ from those the report was made from" in text


def test_audit_names_a_swapped_profile(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    folder = _record(tmp_path / "runs")
    desc = json.loads((folder / "run.json").read_text())
    desc["profile_toml"] = desc["profile_toml"].replace(
        "damping_ratio = 0.12", "damping_ratio = 0.15"
    )
    (folder / "run.json").write_text(json.dumps(desc))
    capsys.readouterr()
    assert main(["audit", str(folder)]) == 1
    text = capsys.readouterr().out
    assert "profile, was edited after closing" in text
    assert "replayed estimates differ from those computed live" in text


def test_audit_of_what_is_not_a_run_is_an_error_not_a_difference(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # a CSV or a folder of something else gave "note: the run was not closed" and two
    # DIFFERENCE lines with a cause about edited runs; it is one error line
    path = tmp_path / "record.csv"
    path.write_text("time_s,displacement_m\n0,0\n")
    for given, words in ((path, "a file, not a run folder"), (tmp_path, "run.json: missing")):
        assert main(["audit", str(given)]) == 1
        captured = capsys.readouterr()
        assert words in captured.err and "DIFFERENCE" not in captured.out


def test_audit_names_a_truncated_run(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    folder = _record(tmp_path / "runs")
    path = folder / "samples.bin"
    path.write_bytes(path.read_bytes()[: 44 * 1000])
    capsys.readouterr()
    assert main(["audit", str(folder)]) == 1
    text = capsys.readouterr().out
    assert "truncated after it was closed" in text
    assert "the run cannot be replayed" in text


def test_audit_with_another_profile_says_so(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    import dataclasses

    from estimator.profile import save_profile

    folder = _record(tmp_path / "runs")
    other = tmp_path / "other.toml"
    save_profile(
        PROFILE.with_updates(plant=dataclasses.replace(PROFILE.plant, damping_ratio=0.2)), other
    )
    capsys.readouterr()
    assert main(["audit", str(folder), "--profile", str(other)]) == 1
    assert "profile swapped on purpose (--profile)" in capsys.readouterr().out


def test_the_report_s_commands_run_as_printed(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # Issue 12: the report's "reproduce" command did not run (audit ... --out; the
    # option is --report). Both commands are taken from the page and run as printed.
    import html
    import re
    import shlex

    folder = _record(tmp_path / "runs")
    out = tmp_path / "rep"
    assert main(["report", str(folder), "--out", str(out)]) == 0
    page = html.unescape((out / "report.html").read_text())
    reproduce = re.search(r"Reproduce this report: <code>(.*?)</code>", page).group(1)
    check = re.search(r"Check it: <code>(.*?)</code>", page).group(1)
    names = ("figures.json", "report.html", "report.pdf")
    before = {name: (out / name).read_bytes() for name in names}
    capsys.readouterr()
    argv = shlex.split(reproduce)
    assert argv[0] == "forcelens" and main(argv[1:]) == 0
    # the same bytes, figures and pages alike: no date and no random ids in the SVG or the
    # PDF (a walk through a bench day found both differing on every run)
    for name in names:
        assert (out / name).read_bytes() == before[name], name
    capsys.readouterr()
    argv = shlex.split(check)
    assert argv[0] == "forcelens" and main(argv[1:]) == 0
    assert "identical" in capsys.readouterr().out


def test_report_pdf_is_a_multi_page_document(tmp_path: Path) -> None:
    # Reference: pypdf is not a dependency; the PDF standard's page objects are counted
    # in the file itself ("/Type /Page" per page, ISO 32000-1 §7.7.3.3).
    import re

    folder = _record(tmp_path / "runs")
    out = tmp_path / "rep"
    assert main(["report", str(folder), "--out", str(out)]) == 0
    pdf = (out / "report.pdf").read_bytes()
    pages = len(re.findall(rb"/Type\s*/Page[^s]", pdf))
    assert pages >= 4  # summary, overview, close-ups, provenance, every change


def test_a_budget_without_a_stated_stiffness_uncertainty_says_u_leaves_it_out() -> None:
    # A calibration term of 0 N is a profile that states none, not a calibration known
    # exactly (a bench-day walk found U = 0.005 N at 50 N with no word of it).
    from ui.report.tables import budget_lines

    u = {"force_n": 50.0, "observer_n": 0.002, "calibration_n": 0.0, "resolution_n": 1e-4,
         "model_n": 0.0, "combined_n": 0.002, "expanded_n_k2": 0.004}  # fmt: skip
    assert not any("note" in line for line in budget_lines(u))
    text = "\n".join(budget_lines(u, calibration_stated=False))
    assert "states no stiffness uncertainty, so U leaves the calibration" in text
