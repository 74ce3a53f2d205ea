"""Rows drawn from a stored report dict: optics per frequency, headline numbers, finding texts."""

from services.render.tables import headline, location_text, measured_text, optics_rows, quote_label, severity_counts


def _optics() -> dict:
    return {
        "frequencies_ghz": [130.0, 140.0, 150.0], "eps_r": [2.79, 2.80, 2.81], "tan_delta": [0.037, 0.039, 0.041],
        "outside_rf_table": [False, False, True], "transmission_loss_db": [2.5, 2.8, 3.0],
        "absorption_db": [2.1, 2.4, 2.7], "reflection_db": [0.4, 0.37, 0.36], "spillover_db": [0.46] * 3,
        "power_transmission": [0.56, 0.53, 0.50],
        "focus": {"best_focus_mm": [66.0, 70.7, 75.2], "fwhm_mm": [[3.1, 3.3], [3.0, 3.2], [2.9, 3.1]],
                  "fwhm_ratio": [1.01, 1.02, 1.03], "strehl": [0.85, 0.88, 0.87], "focusing_efficiency": [0.49, 0.47, 0.45]},
        "as_designed": {"transmission_loss_db": [2.4, 2.7, 2.9], "focus": {"strehl": [0.86, 0.89, 0.88]}},
        "phase_error": {"rms_rad": [0.05, 0.06, 0.07], "strehl": [0.997, 0.996, 0.995]},
    }


def test_it_turns_columns_into_rows():
    """Each frequency becomes one row with as-designed and as-printed values side by side."""
    rows = optics_rows(_optics())
    assert [r["freq_ghz"] for r in rows] == [130.0, 140.0, 150.0]
    assert rows[1]["printed"]["transmission_loss_db"] == 2.8 and rows[1]["designed"]["transmission_loss_db"] == 2.7
    assert rows[1]["printed"]["strehl"] == 0.88 and rows[1]["designed"]["strehl"] == 0.89
    assert rows[1]["printed"]["fwhm_mm"] == 3.1  # mean of x and y
    assert rows[2]["outside_rf_table"] is True and rows[0]["phase_strehl"] == 0.997


def test_a_spiral_plate_gets_vortex_rows():
    """A vortex section becomes per-frequency purity, ring and null, as designed and as printed; other parts None."""
    optics = {**_optics(), "focus": None, "vortex": {
        "charge": 1, "steps": 0, "how": "declared", "distance_mm": [400.0, 430.0, 460.0],
        "as_designed": {"mode_purity": [0.97, 0.976, 0.975], "ring_radius_mm": [15.0, 15.2, 15.4],
                        "null_depth_db": [29.0, 29.4, 29.1]},
        "as_printed": {"mode_purity": [0.96, 0.973, 0.97], "ring_radius_mm": [15.1, 15.3, 15.5],
                       "null_depth_db": [25.0, 26.0, 27.0]}}}
    row = optics_rows(optics)[1]
    assert row["vortex"]["as_designed"]["mode_purity"] == 0.976 and row["vortex"]["as_printed"]["null_depth_db"] == 26.0
    assert row["vortex"]["distance_mm"] == 430.0 and row["printed"].get("strehl") is None
    assert optics_rows(_optics())[0]["vortex"] is None


def test_it_tolerates_a_partial_report():
    """Missing sections give empty rows and None values, never an exception."""
    assert optics_rows(None) == []
    rows = optics_rows({"frequencies_ghz": [100.0]})
    assert rows[0]["printed"]["transmission_loss_db"] is None and rows[0]["designed"].get("strehl") is None
    head = headline({"verdict": "printable"})
    assert head["cost_one"] is None and head["loss_db"] is None and head["counts"] == {"blocker": 0, "caution": 0, "note": 0}


def test_the_headline_reads_the_band_centre():
    """A sweep's headline loss and Strehl ratio are those of its middle frequency."""
    report = {"verdict": "printable_with_cautions", "optics": _optics(),
              "findings": [{"severity": "caution"}, {"severity": "note"}, {"severity": "caution"}],
              "estimate": {"print_time_s": 884.0, "material_g": 9.4, "calibrated": False,
                           "cost": {"currency": "EUR", "total": 28.57},
                           "quantities": [{"quantity": 1, "total": 28.57}, {"quantity": 5, "total": 96.85}]}}
    head = headline(report)
    assert head["freq_ghz"] == 140.0 and head["loss_db"] == 2.8 and head["strehl"] == 0.88
    assert head["counts"] == {"blocker": 0, "caution": 2, "note": 1}
    assert head["quantities"][5]["total"] == 96.85 and head["cost_one"] == 28.57


def test_it_writes_where_and_how_much():
    """A finding's place and measure read as a person would say them."""
    finding = {"measured": 0.1, "limit": 0.4, "unit": "mm", "location_mm": [-0.025, -2.975, 1.025], "layers": [20, 59]}
    assert location_text(finding) == "(-0.03, -2.98, 1.02) mm, layers 20-59"
    assert measured_text(finding) == "0.1 mm against a limit of 0.4 mm"
    assert measured_text({"measured": 2.0, "unit": "bodies"}) == "2 bodies"
    assert measured_text({"measured": 1.0, "limit": 0.0, "unit": "edges"}) == "1 edge against a limit of 0 edges"
    assert measured_text({"measured": 6.2, "limit": 5.0, "unit": "ratio"}) == "6.2 (height over width) against a limit of 5"
    # Three significant figures, never in exponent form on the page: a trapped hollow's section in mm2.
    assert measured_text({"measured": 1466.9, "limit": 25.0, "unit": "mm2"}) == "1,470 mm2 against a limit of 25 mm2"
    assert measured_text({"measured": 0.0159, "unit": "mm"}) == "0.0159 mm"
    assert measured_text({"measured": -123456.0, "unit": "mm"}) == "-123,000 mm"
    # A value within three figures of its limit gets the figures that tell them apart (up to six): a spot ratio
    # missed by 0.0005x read "1.3 x against a limit of 1.3 x".
    assert measured_text({"measured": 1.3005, "limit": 1.3, "unit": "x"}) == "1.3005 x against a limit of 1.3 x"
    assert measured_text({"measured": 2.0001, "limit": 2.0, "unit": "dB"}) == "2.0001 dB against a limit of 2 dB"
    assert measured_text({"measured": 1.3, "limit": 1.3, "unit": "x"}) == "1.3 x against a limit of 1.3 x"
    assert location_text({"layers": [3, 3]}) == "layer 3" and measured_text({"measured": None}) == ""
    assert severity_counts([{"severity": "blocker"}]) == {"blocker": 1, "caution": 0, "note": 0}
    assert quote_label("setup_labour") == "Set-up labour" and quote_label("new_item") == "New item"
