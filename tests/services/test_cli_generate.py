"""`phasewright generate`: a parametric part written as a mesh, and checked at its own frequency."""

import json

from services.cli import main
from services.intake import read_part

COMMON = ["--material", "standard-resin", "--printer", "bay1-lcd-resin"]


def test_it_writes_a_watertight_zoned_lens(tmp_path, capsys):
    """The generated STL reads back through intake as one watertight body of the asked diameter."""
    out = tmp_path / "zoned.stl"
    assert main(["generate", "zoned", "--diameter-mm", "40", "--focal-length-mm", "48", "--freq-ghz", "140",
                 "-o", str(out), *COMMON, "--format", "json"]) == 0
    derived = json.loads(capsys.readouterr().out)["derived"]
    part = read_part(out.read_bytes(), name="zoned.stl")
    assert part.watertight and part.bodies == 1
    assert abs(part.bbox_mm[0] - 40.0) < 0.05
    assert derived["zone_radii_mm"]


def test_check_looks_at_the_parts_own_frequency_and_focus(tmp_path, capsys):
    """--check runs the optics at the design frequency and with the part's focal length."""
    out = tmp_path / "spiral.stl"
    assert main(["generate", "spiral", "--diameter-mm", "30", "--freq-ghz", "150", "--charge", "1",
                 "-o", str(out), "--check", *COMMON, "--format", "json"]) == 0
    report = json.loads(capsys.readouterr().out)
    assert report["optics"]["frequencies_ghz"] == [150.0]
    assert report["design"]["parameters"]["charge"] == 1


def test_bad_parameters_exit_2_with_a_sentence(tmp_path, capsys):
    """A topological charge of 0 makes no part: exit 2, one sentence, no file."""
    out = tmp_path / "bad.stl"
    assert main(["generate", "spiral", "--diameter-mm", "30", "--freq-ghz", "150", "--charge", "0",
                 "-o", str(out), *COMMON]) == 2
    assert "charge" in capsys.readouterr().err and not out.exists()


def test_every_generate_help_reads_as_words(capsys):
    """No option's help leaks argparse internals (a literal % in a help text) or says "(default None)"."""
    import pytest

    from services.components import KINDS

    for kind in KINDS:
        with pytest.raises(SystemExit):
            main(["generate", kind, "--help"])
        text = capsys.readouterr().out
        assert "option_strings" not in text and "(default None)" not in text, kind
    with pytest.raises(SystemExit):
        main(["generate", "window", "--help"])
    assert "below 1 % across the band" in " ".join(capsys.readouterr().out.split())
