"""Checks that explain themselves: each problem names the value (by path) and says what to enter.

These come before ``PrinterProfile.from_dict`` / ``Material.from_dict``, which stay the final gate:
they refuse what cannot be a printer at all, these refuse what would make the checks wrong.
"""

from __future__ import annotations

from services.findings import SEVERITIES
from services.profiles import PROCESSES
from webapp.catalogue.schema import COST, MATERIAL, RULES, TIME_MODELS, XY_LIMITS, Z_LIMITS, Number, label_of, time_model_for

Problem = tuple[str | None, str]

# Two lengths closer than this are the same length (form values arrive as decimal floats).
SAME_MM = 1e-9


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def number_problem(path: str, number: Number, value) -> str | None:
    """Return a sentence when a value does not fit its kind, or None when it does."""
    label = label_of(path)
    if value is None:
        return None if number.kind in ("limit", "severity", "angle") else f"Enter the {label.lower()}."
    if number.kind == "severity":
        return None if value in SEVERITIES else f"{label}: choose {', '.join(SEVERITIES)}."
    if not _is_number(value):
        return f"{label}: enter a number, not {value!r}."
    if number.kind in ("limit", "positive") and value <= 0:
        return f"{label} must be above 0 ({value:g} given); leave a rule limit blank to skip that check."
    if number.kind == "money" and value < 0:
        return f"{label} cannot be negative ({value:g} given); enter 0 if there is nothing to charge."
    if number.kind in ("nonneg", "count") and value < 0:
        return f"{label} cannot be negative ({value:g} given)."
    if number.kind == "count" and value != int(value):
        return f"{label} must be a whole number ({value:g} given)."
    if number.kind == "fraction" and not 0 <= value <= 1:
        return f"{label} is a share from 0 to 1 (0.5 = 50 %); {value:g} is outside it."
    if number.kind == "probability" and not 0 <= value < 1:
        return f"{label} is a share from 0 to below 1 (0.1 = 10 %); {value:g} is outside it."
    if number.kind == "angle" and not 0 <= value <= 90:
        return f"{label} is an angle from horizontal, 0 to 90 degrees; {value:g} is outside it."
    return None


def printer_problems(data: dict) -> list[Problem]:
    """Return every problem of a printer profile's data, each with the path of the value at fault."""
    problems = _basic_problems(data)
    problems += _table_problems(data, "rules")
    problems += _grid_problems(data)
    problems += _time_model_problems(data)
    problems += [(f"cost.{n.key}", msg) for n in COST
                 if (msg := number_problem(f"cost.{n.key}", n, (data.get("cost") or {}).get(n.key)))]
    return problems


def _basic_problems(data: dict) -> list[Problem]:
    problems: list[Problem] = []
    if data.get("technology") not in PROCESSES.get(data.get("process"), ()):
        kinds = ", ".join(PROCESSES.get(data.get("process"), ())) or "none"
        problems.append(("technology", f"{data.get('technology')!r} is not a kind of "
                                       f"{str(data.get('process')).replace('_', ' ')}; choose one of: {kinds}."))
    elif time_model_for(data["technology"]) is None:
        problems.append(("technology", f"There is no print-time model for {data['technology'].replace('_', ' ')} "
                                       "yet, so no check on this printer could be estimated; choose another technology."))
    for key in ("pixel_mm", "layer_height_mm"):
        if not (_is_number(data.get(key)) and 0 < data[key] <= 2):
            problems.append((key, f"The {label_of(key)} must be above 0 and at most 2 mm."))
    heights = data.get("layer_heights_mm") or []
    if not heights or not all(_is_number(h) and 0 < h <= 2 for h in heights):
        problems.append(("layer_heights_mm", "List the layer heights the printer offers, each above 0 and at most 2 mm."))
    elif _is_number(data.get("layer_height_mm")) and not any(abs(h - data["layer_height_mm"]) < SAME_MM for h in heights):
        offered = ", ".join(f"{h:g}" for h in heights)
        problems.append(("layer_height_mm", f"The layer height {data['layer_height_mm']:g} mm is not one this printer "
                                            f"offers ({offered} mm): choose one of those, or add it to the offered heights."))
    volume = data.get("build_volume_mm") or []
    if len(volume) != 3 or not all(_is_number(v) and v > 0 for v in volume):
        problems.append(("build_volume_mm", "Give the build volume as three positive lengths in mm (x, y, z)."))
    for key in ("xy_accuracy_mm", "z_accuracy_mm"):
        if not (_is_number(data.get(key)) and data[key] >= 0):
            problems.append((key, f"The {label_of(key)} must be 0 or more, in mm."))
    return problems


def _table_problems(data: dict, table: str) -> list[Problem]:
    problems = []
    for rule, (_, numbers) in RULES.items():
        limits = (data.get(table) or {}).get(rule) or {}
        for n in numbers:
            path = f"{table}.{rule}.{n.key}"
            if msg := number_problem(path, n, limits.get(n.key)):
                problems.append((path, msg))
    return problems


def _grid_problems(data: dict) -> list[Problem]:
    """Refuse limits finer than the pixel or the layer: the printer could not honour them."""
    pixel, layer = data.get("pixel_mm"), data.get("layer_height_mm")
    rules = data.get("rules") or {}
    problems = []
    for paths, step, what in ((XY_LIMITS, pixel, "pixel"), (Z_LIMITS, layer, "layer")):
        if not (_is_number(step) and step > 0):
            continue
        for rel, phrase in paths.items():
            rule, key = rel.split(".")
            value = (rules.get(rule) or {}).get(key)
            if _is_number(value) and 0 < value < step - SAME_MM:
                problems.append((f"rules.{rel}", f"The {phrase} ({value:g} mm) is smaller than one {what} ({step:g} mm): "
                                                 f"the printer cannot make anything finer than its {what}, so enter "
                                                 f"at least {step:g} mm."))
    ratio = rules.get("aspect_ratio") or {}
    if _is_number(ratio.get("caution")) and _is_number(ratio.get("blocker")) and ratio["caution"] > ratio["blocker"]:
        problems.append(("rules.aspect_ratio.caution", f"The caution ratio ({ratio['caution']:g}) is above the blocker "
                                                       f"ratio ({ratio['blocker']:g}); a caution must come first."))
    return problems


def _time_model_problems(data: dict) -> list[Problem]:
    model = time_model_for(data.get("technology", ""))
    if model is None:
        return []
    _, numbers, needed = TIME_MODELS[model]
    constants = data.get("time_model") or {}
    problems = []
    for n in numbers:
        value = constants.get(n.key)
        if value is None and n.key not in needed:
            continue
        if msg := number_problem(f"time_model.{n.key}", n, value):
            problems.append((f"time_model.{n.key}", msg))
    return problems


def material_problems(data: dict) -> list[Problem]:
    """Return every problem of a material's data, each with the path of the value at fault."""
    problems = [(n.key, msg) for n in MATERIAL if (msg := number_problem(n.key, n, data.get(n.key)))]
    if data.get("price_unit") not in ("kg", "l"):
        problems.append(("price_unit", "Price the material per kg or per l."))
    unknown = sorted(set(data.get("processes") or ()) - set(PROCESSES))
    if unknown:
        problems.append(("processes", f"Unknown process {', '.join(unknown)}; choose from {', '.join(PROCESSES)}."))
    band = data.get("band_ghz")
    if band and not (len(band) == 2 and all(_is_number(v) for v in band) and 0 < band[0] < band[1]):
        problems.append(("band_ghz", "The design band needs a positive low end below its high end, e.g. 75, 110 GHz."))
    return problems + rf_problems(data.get("rf") or [])


def rf_problems(rows: list[dict]) -> list[Problem]:
    """Return the problems of an RF table: values in range, one row per frequency, a source on every row."""
    problems: list[Problem] = []
    seen: set[float] = set()
    for i, row in enumerate(rows):
        freq = row.get("freq_ghz")
        at = f"at {freq:g} GHz" if _is_number(freq) else f"in row {i + 1}"
        if not (_is_number(freq) and freq > 0):
            problems.append((f"rf.{i}.freq_ghz", f"RF row {i + 1}: the frequency must be above 0 GHz."))
        elif freq in seen:
            problems.append((f"rf.{i}.freq_ghz", f"There are two RF rows at {freq:g} GHz; keep one."))
        seen.add(freq)
        if not (_is_number(row.get("eps_r")) and row["eps_r"] >= 1):
            problems.append((f"rf.{i}.eps_r", f"The permittivity {at} must be 1 or more (vacuum is 1)."))
        if not (_is_number(row.get("tan_delta")) and row["tan_delta"] >= 0):
            problems.append((f"rf.{i}.tan_delta", f"The loss tangent {at} cannot be negative."))
        if not str(row.get("source") or "").strip():
            problems.append((f"rf.{i}.source", f"Say where the values {at} come from (a paper, a datasheet, "
                                               "a measurement, or 'from memory')."))
    return problems
