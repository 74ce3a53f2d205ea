"""Forms of the designer's pages: they parse and explain, the services decide."""

import re

from django import forms

from services.components import component_parameters
from services.errors import UnusableInput
from services.intake import UNITS
from services.profiles import check_pairing
from services.settings import ORIENTATIONS, CheckSettings, OpticsSettings
from webapp.catalogue.selectors import material_list_active, printer_list_active

PART_PREFIX = "part_"


class MultipleFileInput(forms.ClearableFileInput):
    allow_multiple_selected = True


class MultipleFileField(forms.FileField):
    """A file field that takes one or many files and cleans to a list."""

    def __init__(self, *args, **kwargs):
        kwargs.setdefault("widget", MultipleFileInput(attrs={"accept": ".stl,.3mf,.obj,.ply"}))
        super().__init__(*args, **kwargs)

    def clean(self, data, initial=None):
        single = super().clean
        if isinstance(data, (list, tuple)):
            return [single(item, initial) for item in data] or [single(None, initial)]
        return [single(data, initial)]


def parse_quantities(text: str) -> tuple[int, ...]:
    """Return the quantities in '1, 5, 10'; raise ValueError on anything else."""
    return tuple(int(q) for q in (text or "").replace(" ", "").split(",") if q)


class CheckOptionsForm(forms.Form):
    printer = forms.ModelChoiceField(queryset=printer_list_active(), to_field_name="slug", empty_label=None,
                                     label="Printer profile")
    material = forms.ModelChoiceField(queryset=material_list_active(), to_field_name="slug", empty_label=None)
    orientation = forms.ChoiceField(choices=[(o, f"build axis {o}") for o in ORIENTATIONS], initial="+z",
                                    label="Build orientation", help_text="which axis of the file points up on the printer")
    quantities = forms.CharField(initial="1, 5, 10, 25", help_text="comma-separated quantities to quote")
    freqs = forms.CharField(required=False, label="Design frequencies (GHz)",
                            help_text="140, or 110,140,170, or 110:170:7 (start:stop:points); empty: the part's own "
                                      "frequency, else the material's band")
    focal_length_mm = forms.FloatField(required=False, min_value=0.001, label="Intended focal length (mm)",
                                       help_text="from the part's far extreme along the build axis; empty: no focus "
                                                 "metrics (a generated lens uses its own)")
    edge_taper_db = forms.FloatField(required=False, min_value=0.1, max_value=60, label="Edge taper (dB)",
                                     help_text="Gaussian illumination at the part's rim; empty: 10 dB")
    beam_waist_mm = forms.FloatField(required=False, min_value=0.001, label="Beam waist (mm)",
                                     help_text="instead of an edge taper: the Gaussian waist radius at the part")

    option_fields = ("printer", "material", "orientation", "quantities")
    optics_fields = ("freqs", "focal_length_mm", "edge_taper_db", "beam_waist_mm")

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["printer"].queryset = printer_list_active()
        self.fields["material"].queryset = material_list_active()
        if not self.is_bound and "printer" not in self.initial:
            first = printer_list_active().first()
            self.initial["printer"] = first.slug if first else None
        if not self.is_bound and "material" not in self.initial:
            self.initial["material"] = self._first_material_for(self.initial.get("printer"))

    def _first_material_for(self, printer_slug: str | None) -> str | None:
        """Return the first material the (given or first) printer can print, so the defaults agree."""
        printer = printer_list_active().filter(slug=printer_slug).first() if printer_slug else printer_list_active().first()
        if printer is None:
            return None
        for material in material_list_active():
            try:
                check_pairing(printer.snapshot(), material.snapshot())
                return material.slug
            except UnusableInput:
                continue
        return None

    def clean(self):
        data = super().clean()
        self._clean_settings(data)
        if data.get("printer") and data.get("material"):
            try:
                check_pairing(data["printer"].snapshot(), data["material"].snapshot())
            except UnusableInput as exc:
                self.add_error("material", exc.message)
        return data

    def _clean_settings(self, data: dict) -> None:
        from services.cli import parse_freqs

        try:
            quantities = parse_quantities(data.get("quantities", ""))
        except ValueError:
            self.add_error("quantities", "Give whole numbers separated by commas, e.g. 1, 5, 10, 25.")
            return
        try:
            optics = OpticsSettings(freqs_ghz=parse_freqs(data.get("freqs")), focal_length_mm=data.get("focal_length_mm"),
                                    edge_taper_db=data.get("edge_taper_db"), beam_waist_mm=data.get("beam_waist_mm"))
            data["check_settings"] = CheckSettings(orientation=data.get("orientation") or "+z", quantities=quantities,
                                                   optics=optics)
        except UnusableInput as exc:
            field = {"bad_frequency": "freqs", "bad_quantity": "quantities", "bad_focal_length": "focal_length_mm",
                     "bad_illumination": "beam_waist_mm" if data.get("beam_waist_mm") else "edge_taper_db",
                     "bad_orientation": "orientation"}.get(exc.code)
            self.add_error(field, exc.message)


class UploadForm(CheckOptionsForm):
    file = MultipleFileField(label="Mesh files", help_text="STL, 3MF, OBJ or PLY; one or many, each becomes a design "
                                                           "and a check; the format is read from the bytes")
    units = forms.ChoiceField(choices=[("", "not stated (assume mm)")] + [(u, u) for u in UNITS],
                              required=False, help_text="for STL, OBJ and PLY, which carry no units; 3MF states its own")

    field_order = ["file", "units", "printer", "material"]


class RevisionForm(UploadForm):
    """A new revision of a design: one file, and a note of what changed."""

    file = forms.FileField(label="Revised mesh file", help_text="STL, 3MF, OBJ or PLY")
    note = forms.CharField(required=False, max_length=300, label="What changed",
                           help_text="a line for the revision list, e.g. 'fins widened to 0.5 mm'")

    field_order = ["file", "note", "units", "printer", "material"]

    def clean_file(self):
        return [self.cleaned_data["file"]]


class RecheckForm(forms.Form):
    """The same design on more printers and materials: one check per compatible pair."""

    printers = forms.ModelMultipleChoiceField(queryset=printer_list_active(), to_field_name="slug",
                                              widget=forms.CheckboxSelectMultiple, label="Printer profiles")
    materials = forms.ModelMultipleChoiceField(queryset=material_list_active(), to_field_name="slug",
                                               widget=forms.CheckboxSelectMultiple, label="Materials")

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["printers"].queryset = printer_list_active()
        self.fields["materials"].queryset = material_list_active()

    def pairs(self) -> tuple[list, list[str]]:
        """Return the (printer, material) pairs that can print, and a sentence for each that cannot."""
        ok, skipped = [], []
        for printer in self.cleaned_data["printers"]:
            for material in self.cleaned_data["materials"]:
                try:
                    check_pairing(printer.snapshot(), material.snapshot())
                    ok.append((printer, material))
                except UnusableInput:
                    skipped.append(f"{material.name} on {printer.name}")
        return ok, skipped


def _part_field(spec) -> forms.Field:
    """Return the form field of one component parameter, its limits and help from the spec."""
    words = spec.name.removesuffix(f"_{spec.unit.lower()}") if spec.unit else spec.name
    label = re.sub(r"\bfreq\b", "frequency", words.replace("_", " ")).capitalize()
    label += f" ({spec.unit})" if spec.unit else ""
    default = "" if spec.default is None else spec.default
    help_text = spec.help + ("" if spec.default is not None else " (leave empty to work it out)")
    if spec.type == "choice":
        return forms.ChoiceField(choices=[(c, c) for c in spec.choices], initial=default, label=label, help_text=help_text)
    field_class = forms.IntegerField if spec.type == "int" else forms.FloatField
    field = field_class(required=spec.default is not None, initial=default, label=label, help_text=help_text,
                        max_value=spec.max, min_value=None if spec.min_exclusive else spec.min)
    field.widget.attrs["step"] = "1" if spec.type == "int" else "any"
    return field


class ParametricForm(CheckOptionsForm):
    """The options of a check plus the parameters of one component kind (``part_<name>`` fields)."""

    note = forms.CharField(required=False, max_length=300, label="What changed",
                           help_text="for a new revision: a line for the revision list")

    def __init__(self, *args, kind: str, **kwargs):
        super().__init__(*args, **kwargs)
        self.kind = kind
        self.specs = component_parameters(kind)
        for spec in self.specs:
            self.fields[PART_PREFIX + spec.name] = _part_field(spec)

    def part_fields(self):
        return [self[PART_PREFIX + s.name] for s in self.specs]

    def params(self) -> dict:
        """Return the component parameters given (empty ones left for the builder to work out)."""
        data = self.cleaned_data
        return {s.name: data[PART_PREFIX + s.name] for s in self.specs
                if data.get(PART_PREFIX + s.name) not in (None, "")}

    def add_build_error(self, exc: UnusableInput) -> None:
        """Put the builder's sentence beside the parameter it names, else above the form."""
        named = [s.name for s in self.specs if re.search(rf"\b{re.escape(s.name)}\b", exc.message)
                 or exc.code.startswith(re.sub(r"_(mm|ghz|deg)$", "", s.name) + "_")]
        self.add_error(PART_PREFIX + named[0] if named else None, exc.message)
