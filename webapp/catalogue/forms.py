"""Forms of the lab manager's pages: they lay the numbers out and parse them; the services decide.

A form turns its fields into the data of a profile or material (``to_data``) and puts the
services' problems back beside the field they are about (``add_problems``).
"""

from __future__ import annotations

import json
import re

from django import forms

from services.findings import SEVERITIES
from services.profiles import PROCESSES
from webapp.catalogue.schema import COST, MATERIAL, RULES, TIME_MODELS, Number, time_model_for
from webapp.catalogue.templatetags.catalogue import words

TECHNOLOGIES = [t for kinds in PROCESSES.values() for t in kinds]
MAX_RF_ROWS = 40


def _words(name: str) -> str:
    return words(name)


def number_field(number: Number, required: bool = False) -> forms.Field:
    """Return the form field of one editable value (limits checked by the services, so messages explain)."""
    if number.kind == "severity":
        return forms.ChoiceField(label=number.label, required=False,
                                 choices=[("", "not set")] + [(s, s) for s in SEVERITIES])
    cls = forms.IntegerField if number.integer else forms.FloatField
    return cls(label=number.label, required=required, widget=forms.NumberInput(attrs={"step": "any"}))


def parse_numbers(text: str, count: int | None = None) -> list[float]:
    """Read '0.025, 0.05' or '130 x 80 x 160' as numbers; ValueError when it cannot."""
    parts = [p for p in re.split(r"[\s,;x×]+", text.strip()) if p]
    values = [float(p) for p in parts]
    if not values or (count is not None and len(values) != count):
        raise ValueError(text)
    return values


def _numbers_text(values) -> str:
    return ", ".join(f"{v:g}" for v in values or ())


class EntryForm(forms.Form):
    """What printers and materials share: names, the change note, the advanced JSON and the edit's base."""

    slug = forms.SlugField(label="Short name", help_text="lower-case letters, digits and hyphens; "
                           "fixed once created, reports refer to it")
    name = forms.CharField(max_length=120, help_text="as reports and the upload form show it")
    note = forms.CharField(max_length=300, required=False, label="What changed and why",
                           help_text="kept with this version in the history")
    notes = forms.CharField(required=False, widget=forms.Textarea(attrs={"rows": 3, "cols": 80}),
                            label="Notes for designers")
    advanced = forms.CharField(required=False, label="Advanced (JSON)",
                               widget=forms.Textarea(attrs={"rows": 10, "cols": 80, "spellcheck": "false"}),
                               help_text="sources of each value, and any value without a field above")
    base_version = forms.IntegerField(required=False, widget=forms.HiddenInput)

    def __init__(self, *args, base: dict, creating: bool, **kwargs):
        super().__init__(*args, **kwargs)
        self.base, self.creating = base, creating
        if not creating:
            del self.fields["slug"]

    def clean_advanced(self) -> dict:
        text = self.cleaned_data.get("advanced") or ""
        try:
            value = json.loads(text) if text.strip() else {}
        except json.JSONDecodeError as exc:
            raise forms.ValidationError(f"This is not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg}).")
        if not isinstance(value, dict):
            raise forms.ValidationError('Write a JSON object, e.g. {"sources": {}}.')
        return value

    def add_problems(self, problems) -> None:
        """Put each (path, sentence) beside its field, or above the form when it has none."""
        for path, message in problems:
            name = self.field_for(path) if path else None
            self.add_error(name if name in self.fields else None, message)

    def field_for(self, path: str) -> str:
        return path.replace(".", "__")

    def bound(self, names) -> list:
        return [self[n] for n in names if n in self.fields]


class PrinterForm(EntryForm):
    """A printer profile: resolution and volume, rule limits, time model and cost as labelled fields."""

    process = forms.ChoiceField(choices=[(p, _words(p)) for p in PROCESSES], help_text="ISO/ASTM 52900 category")
    technology = forms.ChoiceField(choices=[(t, _words(t)) for t in TECHNOLOGIES],
                                   help_text="decides the print-time model below")
    pixel_mm = forms.FloatField(label="Pixel, mm", help_text="the XY grid the part is printed on, e.g. 0.05",
                                widget=forms.NumberInput(attrs={"step": "any"}))
    layer_height_mm = forms.FloatField(label="Layer height for checks, mm", help_text="one of the offered heights",
                                       widget=forms.NumberInput(attrs={"step": "any"}))
    layer_heights_mm = forms.CharField(label="Offered layer heights, mm", help_text="e.g. 0.025, 0.05, 0.1")
    build_volume_mm = forms.CharField(label="Build volume, mm", help_text="x × y × z, e.g. 130 x 80 x 160")
    xy_accuracy_mm = forms.FloatField(label="XY accuracy, mm", widget=forms.NumberInput(attrs={"step": "any"}))
    z_accuracy_mm = forms.FloatField(label="Z accuracy, mm", widget=forms.NumberInput(attrs={"step": "any"}))
    cost__currency = forms.CharField(max_length=8, label="Currency", help_text="the materials' currency, e.g. EUR")

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        for rule, (title, numbers) in RULES.items():
            self.fields[f"rules__{rule}__enabled"] = forms.ChoiceField(
                label="Check", choices=[("on", "checked"), ("off", "switched off")])
            for n in numbers:
                self.fields[f"rules__{rule}__{n.key}"] = number_field(n)
        for model, (_, numbers, _) in TIME_MODELS.items():
            for n in numbers:
                self.fields[f"time_model__{model}__{n.key}"] = number_field(n)
        for n in COST:
            self.fields[f"cost__{n.key}"] = number_field(n)
        self.initial = {**self._initial_from(self.base), **self.initial}

    def _initial_from(self, data: dict) -> dict:
        initial = {k: data.get(k) for k in ("slug", "name", "process", "technology", "pixel_mm", "layer_height_mm",
                                            "xy_accuracy_mm", "z_accuracy_mm", "notes")}
        initial["layer_heights_mm"] = _numbers_text(data.get("layer_heights_mm"))
        initial["build_volume_mm"] = " x ".join(f"{v:g}" for v in data.get("build_volume_mm") or ())
        initial["base_version"] = data.get("version")
        rules, tm, cost = data.get("rules") or {}, data.get("time_model") or {}, data.get("cost") or {}
        for rule, (_, numbers) in RULES.items():
            limits = rules.get(rule) or {}
            initial[f"rules__{rule}__enabled"] = "off" if limits.get("enabled") is False else "on"
            initial.update({f"rules__{rule}__{n.key}": limits.get(n.key) for n in numbers})
        model = time_model_for(data.get("technology", ""))
        if model:
            initial.update({f"time_model__{model}__{n.key}": tm.get(n.key) for n in TIME_MODELS[model][1]})
        initial.update({f"cost__{n.key}": cost.get(n.key) for n in COST})
        initial["cost__currency"] = cost.get("currency")
        initial["advanced"] = json.dumps(_printer_extras(data), indent=2, ensure_ascii=False)
        return initial

    def clean_layer_heights_mm(self) -> list[float]:
        try:
            return parse_numbers(self.cleaned_data["layer_heights_mm"])
        except ValueError:
            raise forms.ValidationError("Write the offered layer heights in mm separated by commas, e.g. 0.025, 0.05, 0.1.")

    def clean_build_volume_mm(self) -> list[float]:
        try:
            return parse_numbers(self.cleaned_data["build_volume_mm"], count=3)
        except ValueError:
            raise forms.ValidationError("Write the build volume as three lengths in mm, x × y × z, e.g. 130 x 80 x 160.")

    def to_data(self) -> dict:
        """Return the profile data the fields (and the advanced JSON) describe."""
        d, extras = self.cleaned_data, self.cleaned_data.get("advanced") or {}
        # Extras first: a value that has a field is the field's, whatever the JSON box says.
        data = {k: v for k, v in extras.items() if k not in ("rules", "time_model", "cost", "sources")}
        data.update({k: d[k] for k in ("process", "technology", "pixel_mm", "layer_height_mm", "layer_heights_mm",
                                       "build_volume_mm", "xy_accuracy_mm", "z_accuracy_mm")})
        data.update(name=d["name"], notes=d.get("notes") or "", sources=extras.get("sources") or {})
        data["rules"] = {**(extras.get("rules") or {}), **self._rules(extras.get("rules") or {})}
        model = time_model_for(d["technology"])
        tm = {n.key: d.get(f"time_model__{model}__{n.key}") for n in TIME_MODELS[model][1]} if model else {}
        data["time_model"] = {**(extras.get("time_model") or {}), **{k: v for k, v in tm.items() if v is not None}}
        data["cost"] = {**(extras.get("cost") or {}), "currency": d.get("cost__currency", "").strip().upper(),
                        **{n.key: d.get(f"cost__{n.key}") for n in COST}}
        return data

    def _rules(self, extra_rules: dict) -> dict:
        d, rules = self.cleaned_data, {}
        for rule, (_, numbers) in RULES.items():
            limits = {k: v for k, v in (extra_rules.get(rule) or {}).items() if k != "enabled"}
            for n in numbers:
                value = d.get(f"rules__{rule}__{n.key}")
                limits[n.key] = value if value not in ("", None) else None
            if d.get(f"rules__{rule}__enabled") == "off":
                limits["enabled"] = False
            rules[rule] = limits
        return rules

    def field_for(self, path: str) -> str:
        head, _, key = path.partition(".")
        if head == "time_model":
            model = time_model_for(self.data.get("technology") or self.base.get("technology", ""))
            return f"time_model__{model}__{key}"
        return super().field_for(path)

    def fieldsets(self) -> list[dict]:
        """Return the form as cards of field groups, in page order (other time models folded away)."""
        current = time_model_for(self["technology"].value() or "")
        rules = [{"title": title, "fields": self.bound([f"rules__{rule}__enabled"] +
                                                       [f"rules__{rule}__{n.key}" for n in numbers])}
                 for rule, (title, numbers) in RULES.items()]
        models = [{"title": title, "folded": model != current,
                   "fields": self.bound([f"time_model__{model}__{n.key}" for n in numbers])}
                  for model, (title, numbers, _) in TIME_MODELS.items()]
        return [
            {"title": "Printer", "groups": [{"fields": self.bound(["slug", "name", "process", "technology"])}]},
            {"title": "Resolution and build volume", "groups": [{"fields": self.bound(
                ["pixel_mm", "layer_height_mm", "layer_heights_mm", "build_volume_mm", "xy_accuracy_mm", "z_accuracy_mm"])}]},
            {"title": "Design-rule limits", "note": "a blank limit means the rule reports it as not checked",
             "groups": rules},
            {"title": "Print-time model", "note": "only the model of the chosen technology is used and saved",
             "groups": models},
            {"title": "Cost", "groups": [{"fields": self.bound(["cost__currency"] + [f"cost__{n.key}" for n in COST])}]},
            {"title": "Notes, sources and the rest", "groups": [{"fields": self.bound(["notes", "advanced", "note"]), "wide": True}]},
        ]


def _printer_extras(data: dict) -> dict:
    """Return what the fields do not show: sources, and rule, time-model and cost values without a field."""
    model = time_model_for(data.get("technology", ""))
    shown_tm = {n.key for n in TIME_MODELS[model][1]} if model else set()
    rules = {}
    for rule, limits in (data.get("rules") or {}).items():
        shown = {n.key for n in RULES[rule][1]} | {"enabled"} if rule in RULES else set()
        rest = {k: v for k, v in limits.items() if k not in shown}
        if rest:
            rules[rule] = rest
    extras = {"sources": data.get("sources") or {}, "rules": rules,
              "time_model": {k: v for k, v in (data.get("time_model") or {}).items() if k not in shown_tm},
              "cost": {k: v for k, v in (data.get("cost") or {}).items() if k not in {n.key for n in COST} | {"currency"}}}
    return {k: v for k, v in extras.items() if v or k == "sources"}


class MaterialForm(EntryForm):
    """A material: kind, processes, density, price and waste, and its RF table row by row with sources."""

    kind = forms.CharField(max_length=40, help_text="photopolymer, filament, machined…")
    processes = forms.MultipleChoiceField(choices=[(p, _words(p)) for p in PROCESSES], required=False,
                                          widget=forms.CheckboxSelectMultiple, label="Printed by",
                                          help_text="none: a reference material that is not printed")
    price_unit = forms.ChoiceField(choices=[("l", "per litre"), ("kg", "per kg")], label="Priced")
    currency = forms.CharField(max_length=8, help_text="the printers' currency, e.g. EUR")
    band_ghz = forms.CharField(required=False, label="Design band, GHz",
                               help_text="low and high end, e.g. 75, 110 (W band); checks given no frequency run across it")

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        for n in MATERIAL:
            self.fields[n.key] = number_field(n)
        rows = max(len(self.base.get("rf") or ()) + 2, self._posted_rows())
        for i in range(min(rows, MAX_RF_ROWS)):
            self.fields[f"rf__{i}__freq_ghz"] = forms.FloatField(label="Frequency, GHz", required=False)
            self.fields[f"rf__{i}__eps_r"] = forms.FloatField(label="Permittivity εr", required=False)
            self.fields[f"rf__{i}__tan_delta"] = forms.FloatField(label="Loss tangent", required=False)
            self.fields[f"rf__{i}__source"] = forms.CharField(label="Source", required=False, max_length=600,
                                                              widget=forms.Textarea(attrs={"rows": 2, "cols": 50}))
        self.rf_rows = min(rows, MAX_RF_ROWS)
        self.initial = {**self._initial_from(self.base), **self.initial}

    def _posted_rows(self) -> int:
        found = [int(m.group(1)) for k in self.data if (m := re.fullmatch(r"rf__(\d+)__\w+", k))]
        return max(found) + 1 if found else 0

    def _initial_from(self, data: dict) -> dict:
        initial = {k: data.get(k) for k in ("slug", "name", "kind", "price_unit", "currency", "notes",
                                            *(n.key for n in MATERIAL))}
        initial.update(processes=list(data.get("processes") or ()), base_version=data.get("version"),
                       band_ghz=_numbers_text(data.get("band_ghz")))
        for i, row in enumerate(data.get("rf") or ()):
            initial.update({f"rf__{i}__{k}": row.get(k) for k in ("freq_ghz", "eps_r", "tan_delta", "source")})
        initial["advanced"] = json.dumps({"sources": data.get("sources") or {}}, indent=2, ensure_ascii=False)
        return initial

    def clean_band_ghz(self) -> list[float] | None:
        text = (self.cleaned_data.get("band_ghz") or "").strip()
        if not text:
            return None
        try:
            return parse_numbers(text, count=2)
        except ValueError:
            raise forms.ValidationError("Write the band as two frequencies in GHz, low then high, e.g. 75, 110.")

    def to_data(self) -> dict:
        """Return the material data the fields (and the advanced JSON) describe; blank RF rows are dropped."""
        d, extras = self.cleaned_data, self.cleaned_data.get("advanced") or {}
        data = {k: v for k, v in extras.items() if k != "sources"}
        data.update({k: d.get(k) for k in ("kind", "price_unit", *(n.key for n in MATERIAL))})
        data.update(name=d["name"], currency=(d.get("currency") or "").strip().upper(),
                    processes=list(d.get("processes") or ()),
                    notes=d.get("notes") or "", sources=extras.get("sources") or {},
                    rf=[row for _, row in self._rf_rows()], band_ghz=d.get("band_ghz"))
        return data

    def _rf_rows(self) -> list[tuple[int, dict]]:
        """Return the filled RF rows with the form row each came from."""
        rows = []
        for i in range(self.rf_rows):
            row = {k: self.cleaned_data.get(f"rf__{i}__{k}") for k in ("freq_ghz", "eps_r", "tan_delta", "source")}
            if any(v not in (None, "") for v in row.values()):
                rows.append((i, {**row, "source": (row["source"] or "").strip()}))
        return rows

    def add_problems(self, problems) -> None:
        """Map RF problems from the list of filled rows back to the form row they came from."""
        rows = self._rf_rows() if hasattr(self, "cleaned_data") else []
        mapped = []
        for path, message in problems:
            m = re.fullmatch(r"rf\.(\d+)\.(\w+)", path or "")
            if m and int(m.group(1)) < len(rows):
                path = f"rf.{rows[int(m.group(1))][0]}.{m.group(2)}"
            mapped.append((path, message))
        super().add_problems(mapped)

    def fieldsets(self) -> list[dict]:
        """Return the form as cards of field groups, in page order; the RF table is a grid of rows."""
        rf = [[self[f"rf__{i}__{k}"] for k in ("freq_ghz", "eps_r", "tan_delta", "source")] for i in range(self.rf_rows)]
        return [{"title": "Material", "groups": [{"fields": self.bound(["slug", "name", "kind", "processes"])}]},
                {"title": "Mass and price", "groups": [{"fields": self.bound(
                    ["density_g_cm3", "price", "price_unit", "currency", "waste_factor"])}]},
                {"title": "Design band", "groups": [{"fields": self.bound(["band_ghz"])}]},
                {"title": "Permittivity and loss tangent against frequency", "rf": rf,
                 "note": "one row per frequency, each with where its values come from; blank rows are ignored"},
                {"title": "Notes, sources and the rest", "groups": [{"fields": self.bound(["notes", "advanced", "note"]), "wide": True}]}]


class PrintLogForm(forms.Form):
    """A finished print: how long it took, how much it used, and whether it worked."""

    copies = forms.IntegerField(min_value=1, max_value=1000, initial=1, label="Copies in the build",
                                help_text="the report's estimate for a build of this many parts is the comparison")
    actual_print_time = forms.CharField(label="Actual print time",
                                        help_text="h:mm as the printer reported it (2:35), or minutes (155)")
    actual_material_ml = forms.FloatField(required=False, label="Material used, ml",
                                          help_text="blank if not measured", widget=forms.NumberInput(attrs={"step": "any"}))
    outcome = forms.ChoiceField(choices=[("ok", "Printed fine"), ("failed", "Failed")])
    failure_reason = forms.CharField(required=False, label="Why it failed (or a remark)",
                                     widget=forms.Textarea(attrs={"rows": 3, "cols": 60}))

    FIELDS = {"actual_print_time_s": "actual_print_time"}

    def clean_actual_print_time(self) -> float:
        text = self.cleaned_data["actual_print_time"].strip()
        if m := re.fullmatch(r"(\d+):([0-5]?\d)(?::([0-5]?\d))?", text):
            return int(m.group(1)) * 3600 + int(m.group(2)) * 60 + int(m.group(3) or 0)
        try:
            return float(text.replace(",", ".")) * 60
        except ValueError:
            raise forms.ValidationError("Write the time as hours:minutes (2:35) or as minutes (155).")

    def add_problems(self, problems) -> None:
        for path, message in problems:
            name = self.FIELDS.get(path, path)
            self.add_error(name if name in self.fields else None, message)


MEASURE_FILES = 4
MAX_MEASUREMENT_BYTES = 5 * 2**20


class MeasureForm(forms.Form):
    """Touchstone files of flat samples, each with its thickness, and who measured them."""

    lab = forms.CharField(max_length=120, label="Measured by", help_text="the lab (and person) that measured, "
                          "as the source of the new values will say")

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        for i in range(1, MEASURE_FILES + 1):
            self.fields[f"file_{i}"] = forms.FileField(required=False, label=f"Sample {i}, .s2p file")
            self.fields[f"thickness_mm_{i}"] = forms.FloatField(required=False, label=f"Sample {i} thickness, mm",
                                                                widget=forms.NumberInput(attrs={"step": "any"}))

    def samples(self) -> list[tuple[forms.BoundField, forms.BoundField]]:
        """Return each sample's (file, thickness) fields, so the page lays one sample to a row."""
        return [(self[f"file_{i}"], self[f"thickness_mm_{i}"]) for i in range(1, MEASURE_FILES + 1)]

    def clean(self):
        data = super().clean()
        pairs = []
        for i in range(1, MEASURE_FILES + 1):
            upload, thickness = data.get(f"file_{i}"), data.get(f"thickness_mm_{i}")
            if upload is None and thickness is None:
                continue
            if upload is None:
                self.add_error(f"file_{i}", "Choose the .s2p file measured on this sample, or clear its thickness.")
            elif thickness is None or thickness <= 0:
                self.add_error(f"thickness_mm_{i}", f"Give the thickness of {upload.name} in mm (more than 0).")
            elif upload.size > MAX_MEASUREMENT_BYTES:
                self.add_error(f"file_{i}", f"{upload.name} is over {MAX_MEASUREMENT_BYTES // 2**20} MiB; a two-port "
                               "sweep is far smaller, so this is probably not a Touchstone file.")
            else:
                pairs.append((upload.name, upload.read(), thickness))
        if not pairs and not self.errors:
            raise forms.ValidationError("Upload at least one .s2p file with the thickness of its sample.")
        data["pairs"] = pairs
        return data
