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
