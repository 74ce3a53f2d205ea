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
    # A solid box standing on the plate has no thin part, gap, hole, overhang, island or cavity: printable.
    assert report["verdict"] == "printable" and report["findings"] == []
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


def test_a_bad_files_text_line_names_it_once(tmp_path, capsys):
    """'a.stl: ERROR a.stl: the file ...' named the file twice; the summary line names it once, stderr keeps it.
    A one-facet ASCII STL with two corners is one facet, not '1 facets'."""
    bad = tmp_path / "broken.stl"
    bad.write_text("solid x\nfacet normal 0 0 1\nouter loop\nvertex 0 0 0\nvertex 1 0 0\nendloop\nendfacet\nendsolid\n")
    assert main(["check", str(bad), *CHECK]) == 2
    out, err = capsys.readouterr()
    assert out.strip() == (f"{bad}: ERROR: the ASCII STL has 1 facet but 9 numbers instead of 12 (a normal and "
                           "three corners each); export the part again.")
    assert err.strip().startswith("phasewright: broken.stl: the ASCII STL has 1 facet but")


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


def test_check_has_the_workers_memory_and_time_limits_by_default():
    """--memory-limit-mib and --time-limit-s default to the worker's bounds (services.limits)."""
    from services import limits
    from services.cli import build_parser

    args = build_parser().parse_args(["check", "x.stl"])
    assert (args.memory_limit_mib, args.time_limit_s) == (limits.DEFAULT_MEMORY_MIB, limits.DEFAULT_TIME_LIMIT_S)
    assert (limits.DEFAULT_MEMORY_MIB, limits.DEFAULT_TIME_LIMIT_S) == (4096, 600)


def test_a_check_past_its_time_limit_ends_with_a_sentence_naming_it(box_path, monkeypatch, capsys):
    """A file whose check outlasts --time-limit-s 1 is an error naming the limit; the next file is still read."""
    import time

    from services import checking

    real = checking.check_file

    def slow_for_the_first(path, **kwargs):
        if path.endswith("slow.stl"):
            time.sleep(5)
        return real(path, **kwargs)

    slow, noise = box_path.parent / "slow.stl", box_path.parent / "noise.stl"
    slow.write_bytes(box_path.read_bytes())
    noise.write_bytes(b"\x13\x37" * 500)  # refused at once, so the loop's going on is seen without timing a check
    monkeypatch.setattr(checking, "check_file", slow_for_the_first)
    t0 = time.monotonic()
    assert main(["check", str(slow), str(noise), *CHECK, "--time-limit-s", "1", "--format", "json"]) == 2
    assert time.monotonic() - t0 < 4.5
    first, second = json.loads(capsys.readouterr().out)
    assert first["code"] == "time_limit" and first["error"].startswith("slow.stl: the check reached its time limit (1 s)")
    assert "--time-limit-s" in first["error"] and second["code"] == "stl_count_mismatch"


def test_a_check_past_its_memory_limit_ends_with_a_sentence_naming_it(box_path, monkeypatch, capsys):
    """Under --memory-limit-mib 64 a 512 MiB allocation fails: an error naming the limit, not a crash."""
    import numpy as np

    from services import checking

    def greedy(path, **kwargs):
        return np.ones(64 * 2**20)  # 512 MiB of float64, past the 64 MiB headroom

    monkeypatch.setattr(checking, "check_file", greedy)
    assert main(["check", str(box_path), *CHECK, "--memory-limit-mib", "64", "--format", "json"]) == 2
    result = json.loads(capsys.readouterr().out)
    assert result["code"] == "memory_limit"
    assert result["error"].startswith("box.stl: the check reached its memory limit (64 MiB)")


def test_it_takes_a_clear_aperture(box_path, capsys):
    """--clear-aperture-mm is the optical zone the optics use, and the report says it was given (a 6 mm disc
    inside the 10 x 8 mm box: pi 3^2 = 28.3 mm2, computed by hand)."""
    assert main(["check", str(box_path), *CHECK, "--clear-aperture-mm", "6", "--format", "json"]) == 0
    zone = json.loads(capsys.readouterr().out)["optics"]["clear_aperture"]
    assert zone["how"] == "given" and zone["area_mm2"] == pytest.approx(28.27, rel=0.02)


@pytest.mark.parametrize("flag, concurrent", [([], True), (["--sequential-stages"], False)])
def test_sequential_stages_runs_rules_and_optics_one_after_the_other(box_path, monkeypatch, capsys, flag, concurrent):
    """The check runs rules beside optics unless --sequential-stages is given."""
    from services import checking

    real, asked = checking.build_report, []

    def recording(**kwargs):
        asked.append(kwargs["concurrent_stages"])
        return real(**kwargs)

    monkeypatch.setattr(checking, "build_report", recording)
    assert main(["check", str(box_path), *CHECK, *flag, "--format", "json"]) == 0
    assert asked == [concurrent]


def test_a_time_limit_while_rules_and_optics_run_side_by_side_stops_both(box_path, monkeypatch, capsys):
    """The alarm reaches the waiting main thread: both stage threads stop, and the error names the limit."""
    import threading
    import time

    from services import report

    def endless_optics(part, stack, printer, material, settings, progress=None):
        while True:  # reports progress as the real stage does, so it can be told to stop
            time.sleep(0.01)
            progress(0.5)

    def endless_rules(*, stack, part, printer, progress=None):
        endless_optics(part, stack, printer, None, None, progress)

    monkeypatch.setattr(report, "_optics", endless_optics)
    monkeypatch.setattr(report, "run_rules", endless_rules)
    assert main(["check", str(box_path), *CHECK, "--time-limit-s", "1", "--format", "json"]) == 2
    assert json.loads(capsys.readouterr().out)["code"] == "time_limit"
    assert not [t for t in threading.enumerate() if t.name.startswith("phasewright-stage")]
