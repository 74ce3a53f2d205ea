"""Catalogue pages read in words."""



def test_the_printer_page_names_rules_and_limits_in_words(bob_client, seeded):
    """No raw keys (min_gap, rules.min_gap.xy_mm) on the profile page: rule names and limit labels in words."""
    import re

    page = bob_client.get("/catalogue/printers/bay1-lcd-resin/").content.decode()
    text = " ".join(re.sub(r"<[^>]+>", " ", page).split())
    limits = text[text.index("Design-rule limits"):text.index("Print-time model")]
    assert "Minimum gap" in limits and "Gap in XY, mm 0.3" in limits
    assert not re.findall(r"\b[a-z]+_[a-z_]+\b", limits)
    sources = text[text.index("Sources"):]
    assert "rules.min_gap" not in sources and "Minimum gap – Gap in XY, mm" in sources


def test_the_material_page_names_its_sources_in_words(bob_client, seeded):
    """Every source row of the starter resin in words: the RF data's and the design band's read "rf", "band_ghz"."""
    import re

    page = bob_client.get("/catalogue/materials/standard-resin/").content.decode()
    text = " ".join(re.sub(r"<[^>]+>", " ", page).split())
    sources = text[text.index("Sources"):text.index("Version history")]
    assert "RF data" in sources and "Design band, GHz" in sources and "Density, g/cm³" in sources
    labels = re.findall(r"<dt>([^<]*)</dt>", page[page.index("Sources"):page.index("Version history")])
    assert labels and not [label for label in labels if re.fullmatch(r"[a-z_]+", label)]


def test_the_printer_list_spells_technologies_as_the_trade_does(bob_client, seeded):
    """'Lcd masked' read as a key with its underscore dropped; the list and the profile say 'LCD-masked'."""
    import re

    page = bob_client.get("/catalogue/printers/").content.decode()
    text = " ".join(re.sub(r"<[^>]+>", " ", page).split())
    assert "LCD-masked vat photopolymerisation" in text and "laser-scanned vat photopolymerisation" in text
    assert "lcd masked" not in text.lower().replace("lcd-masked", "")
    profile = bob_client.get("/catalogue/printers/bay1-lcd-resin/").content.decode()
    assert "LCD-masked (vat photopolymerisation)" in profile
    edit = bob_client.get("/catalogue/printers/bay1-lcd-resin/edit/").content.decode()
    assert re.search(r'<option value="lcd_masked"[^>]*>LCD-masked</option>', edit)
