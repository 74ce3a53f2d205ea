"""The `phasewright` command's contract: formats, exit codes, a mixed batch, the catalogue listings."""

import json

import pytest
import trimesh

from services.cli import main, parse_freqs
from services.errors import UnusableInput

CHECK = ["--printer", "bay1-lcd-resin", "--material", "standard-resin", "--freq-ghz", "140"]


@pytest.fixture
def box_path(tmp_path):
    mesh = trimesh.creation.box(extents=(10, 8, 2))
    path = tmp_path / "box.stl"
    mesh.export(path)
    return path


def test_it_prints_one_report_object_for_one_path(box_path, capsys):
    """--format json with one path prints one report of the contract, and exits 0."""
    assert main(["check", str(box_path), *CHECK, "--format", "json"]) == 0
    report = json.loads(capsys.readouterr().out)
    assert report["schema"] == "phasewright.report/1"
    assert report["verdict"] in ("printable", "printable_with_cautions", "not_printable")
    assert report["printer"]["slug"] == "bay1-lcd-resin" and report["material"]["slug"] == "standard-resin"
    # 10 x 8 x 2 mm box: 160 mm3, and its bounding box, computed by hand.
    assert report["design"]["bbox_mm"] == [10.0, 8.0, 2.0]
    assert report["design"]["volume_mm3"] == pytest.approx(160.0, rel=1e-9)
    assert report["layers"]["count"] == 40 and report["layers"]["pixel_mm"] == 0.05
    for key in ("name", "sha256", "units", "triangles", "bodies", "watertight"):
        assert key in report["design"]


def test_a_mixed_batch_keeps_going_and_exits_2(box_path, tmp_path, capsys):
    """A bad file gives {path, error} in its place, one stderr line, and exit 2; the good ones still report."""
    bad = tmp_path / "noise.stl"
    bad.write_bytes(b"\x13\x37" * 500)
    assert main(["check", str(box_path), str(bad), str(box_path), *CHECK, "--format", "json"]) == 2
    out, err = capsys.readouterr()
    results = json.loads(out)
    assert [("error" in r) for r in results] == [False, True, False]
    assert results[1]["path"] == str(bad) and "noise.stl" in results[1]["error"]
    assert len(err.strip().splitlines()) == 1 and "noise.stl" in err


def test_it_writes_report_files_to_out(box_path, tmp_path, capsys):
    """--out writes the JSON report and the pictures for each file."""
    out = tmp_path / "reports"
    assert main(["check", str(box_path), *CHECK, "--out", str(out)]) == 0
    folder = next(out.iterdir())
    assert json.loads((folder / "report.json").read_text())["schema"] == "phasewright.report/1"
    assert (folder / "thickness_map.png").read_bytes()[:4] == b"\x89PNG"
    assert "box.stl" in capsys.readouterr().out


def test_an_unknown_printer_is_unusable_input(box_path, capsys):
    """An unknown slug exits 2 with a sentence listing what exists."""
    assert main(["check", str(box_path), "--printer", "bay9", "--material", "pla"]) == 2
    assert "bay1-lcd-resin" in capsys.readouterr().err


def test_the_catalogue_listings_print_every_field(capsys):
    """`printers --format json` and `materials --format json` print whole snapshots."""
    assert main(["printers", "--format", "json"]) == 0
    printers = json.loads(capsys.readouterr().out)
    assert {"slug", "process", "pixel_mm", "layer_height_mm", "build_volume_mm", "rules"} <= set(printers[0])
    assert main(["materials", "--format", "json"]) == 0
    materials = json.loads(capsys.readouterr().out)
    assert all(m["rf"] and all(p["source"] for p in m["rf"]) for m in materials)


def test_it_reads_frequency_ranges():
    """start:stop:points gives evenly spaced points including both ends."""
    assert parse_freqs("110:170:7") == (110.0, 120.0, 130.0, 140.0, 150.0, 160.0, 170.0)
    assert parse_freqs("140") == (140.0,) and parse_freqs("90,140") == (90.0, 140.0)
    with pytest.raises(UnusableInput):
        parse_freqs("a:b")
