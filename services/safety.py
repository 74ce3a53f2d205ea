"""The usual safety reminders a report carries, by process. They defer to local rules."""

from __future__ import annotations

DEFER = ("These are reminders, not a safety assessment: local regulations, the material's safety data sheet, "
         "your institution's chemical, laser and RF safety programmes and the lab safety officer take precedence.")

_BY_PROCESS = {
    "vat_photopolymerisation": (
        "Uncured resin sensitises skin: nitrile gloves changed often, eye protection, no skin contact with uncured or partly cured parts.",
        "Isopropanol for washing is highly flammable (flash point about 12 C): keep it away from ignition sources and hot UV lamps, ventilate, keep lids closed.",
        "UV post-cure light can injure eyes and skin: use an enclosed, interlocked curing unit.",
        "Cure waste resin and rinse liquids before disposal, or dispose of them as hazardous waste under local rules.",
    ),
    "material_extrusion": (
        "Hot nozzle and bed are a burn risk; printers emit ultrafine particles and vapours (ABS more than PLA): ventilate or enclose with filtration.",
        "Keep the printer attended or monitored while it runs.",
    ),
    "material_jetting": (
        "Uncured jetted photopolymer and support material sensitise skin like vat resin; support-removal solutions may be caustic.",
    ),
}

RF = ("When testing the part: never look into a horn or lens or put a hand in the beam; a focusing part raises the local power "
      "density; terminate beams in absorbers and follow the exposure limits your RF or laser safety officer applies.")


def cautions_for(process: str) -> list[str]:
    """Return the reminders for a process, the RF reminder, and the deferral sentence."""
    return [*_BY_PROCESS.get(process, ()), RF, DEFER]
