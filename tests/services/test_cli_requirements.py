"""The command line's requirements: flags, --requirements FILE, and what the JSON report carries."""

import json

import pytest
import trimesh

from services.cli import main

CHECK = ["--printer", "bay1-lcd-resin", "--material", "standard-resin", "--freq-ghz", "140", "--format", "json"]


@pytest.fixture
def plate_path(tmp_path):
    """A 30 x 30 x 2 mm plate: thickness and diameter known by construction."""
    path = tmp_path / "plate.stl"
    trimesh.creation.box(extents=(30, 30, 2)).export(path)
    return path


def test_requirement_findings_and_meets_requirements_are_in_the_json(plate_path, tmp_path, capsys):
    """A file states the diameter, a flag the thickness: the flag's 1.5 mm is missed by 0.5 mm, so no."""
    targets = tmp_path / "targets.json"
    targets.write_text(json.dumps({"max_diameter_mm": 40, "max_thickness_mm": 5}))
    assert main(["check", str(plate_path), *CHECK, "--requirements", str(targets), "--max-thickness-mm", "1.5"]) == 0
    report = json.loads(capsys.readouterr().out)
    assert report["meets_requirements"] == "no"
    assert report["requirements"]["stated"]["max_thickness_mm"] == 1.5
    found = {f["message"].split(" (")[0]: f for f in report["findings"] if f["rule"] == "requirement"}
    assert found["Requirement thickness along the axis"]["severity"] == "blocker"
    assert "missed by 0.5 mm" in found["Requirement thickness along the axis"]["message"]
    assert found["Requirement diameter"]["severity"] == "note"
    assert report["verdict"] in ("printable", "printable_with_cautions")
    # A missed target alone sends nothing to "what must change", which re-runs printability only.
    assert report["what_to_change"] == []


def test_without_requirements_it_reads_not_stated(plate_path, capsys):
    assert main(["check", str(plate_path), *CHECK]) == 0
    report = json.loads(capsys.readouterr().out)
    assert report["meets_requirements"] == "not_stated" and report["requirements"] is None


def test_a_bad_requirements_file_is_unusable_input(plate_path, tmp_path, capsys):
    """A percentage where a fraction belongs exits 2 with the sentence."""
    targets = tmp_path / "targets.json"
    targets.write_text(json.dumps({"min_strehl": 80}))
    assert main(["check", str(plate_path), *CHECK, "--requirements", str(targets)]) == 2
    assert "fraction between 0 and 1" in capsys.readouterr().err


def test_the_text_report_says_whether_it_meets_them(plate_path, capsys):
    assert main(["check", str(plate_path), *CHECK[:-2], "--max-diameter-mm", "20"]) == 0
    assert "meets requirements: NO" in capsys.readouterr().out.splitlines()[0]
