"""Forms of the designer's pages: they parse and explain, the services decide."""

import re
from dataclasses import fields, replace

from django import forms

from services.components import component_parameters
from services.errors import UnusableInput
from services.intake import UNITS
from services.optics.materials import design_freqs_ghz
from services.profiles import check_pairing
from services.requirements import LABELS, LOSS_BASES, Requirements
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


REQUIREMENT_PREFIX = "req_"
FROM_FILE = "file"  # the units choice for a 3MF, which states its own


def _target(label: str, help_text: str, **limits) -> forms.FloatField:
    field = forms.FloatField(required=False, label=label, help_text=help_text, **limits)
    field.widget.attrs["step"] = "any"
    return field


def requirement_fields() -> dict[str, forms.Field]:
    """Return the Requirements section's fields (``req_<name>``), every one optional."""
    fields = {
        "band": forms.CharField(required=False, label="Band (GHz)", help_text="low:high, e.g. 130:150; with no design "
                                "frequencies the optics are evaluated at its ends and middle"),
        "max_insertion_loss_db": _target("Max insertion loss (dB)", "absorption and reflection through the part",
                                         min_value=0),
        "loss_basis": forms.ChoiceField(required=False, label="Loss over", initial="each_frequency",
                                        choices=[(b, b.replace("_", " ")) for b in LOSS_BASES]),
        "max_spot_fwhm_ratio": _target("Max spot FWHM / diffraction limit", "at the design focal plane; 1 is "
                                       "diffraction-limited, e.g. 1.2"),
        "min_focusing_efficiency": _target("Min focusing efficiency", "a fraction, 0 to 1"),
        "min_strehl": _target("Min Strehl ratio", "a fraction, 0 to 1"),
        "focal_length_mm": _target("Focal length (mm)", "where the wavefront must converge, from the part's far "
                                   "extreme"),
        "focal_tolerance_mm": _target("Focal tolerance (± mm)", "required with a focal length"),
        "max_thickness_mm": _target("Max thickness (mm)", "along the optical axis"),
        "max_diameter_mm": _target("Max diameter (mm)", "across the part"),
        "f_number_min": _target("Min f-number", "measured focus over diameter"),
        "f_number_max": _target("Max f-number", "measured focus over diameter"),
        "min_mode_purity": _target("Min vortex mode purity", "spiral phase plates, 0 to 1"),
    }
    return {REQUIREMENT_PREFIX + name: field for name, field in fields.items()}


def stated_requirements(data: dict) -> dict:
    """Return the targets the form states, as Requirements.from_dict takes them; ValueError for a bad band."""
    # Every target the Requirements hold, read from its form field (the band and the loss basis are read below).
    out = {f.name: data.get(REQUIREMENT_PREFIX + f.name) for f in fields(Requirements)
           if f.name not in ("band_ghz", "loss_basis", "source")}
    out = {k: v for k, v in out.items() if v is not None}
    band = (data.get(REQUIREMENT_PREFIX + "band") or "").strip()
    if band:
        out["band_ghz"] = [float(v) for v in band.replace(",", ":").split(":")]
    if out and data.get(REQUIREMENT_PREFIX + "loss_basis"):
        out["loss_basis"] = data[REQUIREMENT_PREFIX + "loss_basis"]
    return out


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
    clear_aperture_mm = forms.FloatField(required=False, min_value=0.001, label="Clear aperture (mm)",
                                         help_text="diameter of the optical zone about the axis; empty: the "
                                                   "generator's, else detected (a flat mounting rim is left out)")

    option_fields = ("printer", "material", "orientation", "quantities")
    optics_fields = ("freqs", "focal_length_mm", "edge_taper_db", "beam_waist_mm", "clear_aperture_mm")
    # A generated part brings its own design frequency; an uploaded mesh needs one or the material's band.
    part_has_frequency = False

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.fields.update(requirement_fields())
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

    def requirement_fields(self):
        return [self[name] for name in self.fields if name.startswith(REQUIREMENT_PREFIX)]

    def clean(self):
        data = super().clean()
        self._clean_settings(data)
        self._clean_requirements(data)
        if data.get("printer") and data.get("material"):
            try:
                check_pairing(data["printer"].snapshot(), data["material"].snapshot())
            except UnusableInput as exc:
                self.add_error("material", exc.message)
        settings = data.get("check_settings")
        if data.get("material") and settings and not settings.optics.freqs_ghz and not self.part_has_frequency:
            try:
                design_freqs_ghz(data["material"].snapshot())
            except UnusableInput as exc:
                self.add_error("freqs", exc.message)
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
                                    edge_taper_db=data.get("edge_taper_db"), beam_waist_mm=data.get("beam_waist_mm"),
                                    clear_aperture_mm=data.get("clear_aperture_mm"))
            data["check_settings"] = CheckSettings(orientation=data.get("orientation") or "+z", quantities=quantities,
                                                   optics=optics)
        except UnusableInput as exc:
            field = {"bad_frequency": "freqs", "bad_quantity": "quantities", "bad_focal_length": "focal_length_mm",
                     "bad_illumination": "beam_waist_mm" if data.get("beam_waist_mm") else "edge_taper_db",
                     "bad_orientation": "orientation", "bad_clear_aperture": "clear_aperture_mm"}.get(exc.code)
            self.add_error(field, exc.message)


    def _clean_requirements(self, data: dict) -> None:
        """Keep the stated targets (``requirement_data``) and the Requirements they make, or say what is wrong."""
        try:
            data["requirement_data"] = stated_requirements(data)
        except ValueError:
            self.add_error(REQUIREMENT_PREFIX + "band", "Give the band as low:high in GHz, e.g. 130:150.")
            return
        try:
            data["requirements"] = Requirements.from_dict(data["requirement_data"]) if data["requirement_data"] else None
        except UnusableInput as exc:
            self.add_error(_requirement_field(exc.message), exc.message)
            return
        if "check_settings" in data:
            data["check_settings"] = replace(data["check_settings"], requirements=data["requirements"])


def _requirement_field(message: str) -> str | None:
    """Return the field a requirement's sentence is about, by the words it uses."""
    words = {"band": "band", "insertion-loss basis": "loss_basis", "tolerance": "focal_tolerance_mm",
             "smallest f-number": "f_number_min"}
    words.update({label: name for name, (label, _) in LABELS.items() if name != "band_ghz"})
    for text, name in words.items():
        if text in message:
            return REQUIREMENT_PREFIX + name
    return None


class UploadForm(CheckOptionsForm):
    file = MultipleFileField(label="Mesh files", help_text="STL, 3MF, OBJ or PLY; one or many, each becomes a design "
                                                           "and a check; the format is read from the bytes")
    units = forms.ChoiceField(
        choices=[("", "choose the file's unit")] + [(u, u) for u in UNITS] + [(FROM_FILE, "as the 3MF "
                 "file states")],
        error_messages={"required": "Choose the unit the file was drawn in: STL, OBJ and PLY carry none, and a "
                                    "wrong guess turns a 60 mm lens into a 2.4 mm one."},
        help_text="STL, OBJ and PLY carry no units, so say which; a 3MF states its own")

    field_order = ["file", "units", "printer", "material"]

    def clean(self):
        data = super().clean()
        if data.get("units") == FROM_FILE:
            unitless = [f.name for f in data.get("file") or () if not _is_zip(f)]
            if unitless:
                self.add_error("units", f"{', '.join(unitless)} carr{'ies' if len(unitless) == 1 else 'y'} no unit of "
                                        "its own (only a 3MF does): choose the unit it was drawn in.")
            data["units"] = ""
        return data


def _is_zip(upload) -> bool:
    """Return True for a zip package (a 3MF is one), reading only its first bytes."""
    head = upload.read(4)
    upload.seek(0)
    return head[:2] == b"PK"


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
    label = spec.spoken.removeprefix("The ").capitalize()
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
    part_has_frequency = True
    demo_requirements = forms.BooleanField(required=False, initial=True, label="Start from the demo lab's targets",
                                           help_text="default targets for this kind at the part's own frequency "
                                                     "and focus (invented for the demo lab; set your own)")

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
        # The sentence names the parameter in words ("The base thickness must ...", "give a base thickness").
        named = [s.name for s in self.specs
                 if re.search(rf"\b{re.escape(s.spoken.removeprefix('The '))}\b", exc.message, re.IGNORECASE)
                 or exc.code.startswith(re.sub(r"_(mm|ghz|deg)$", "", s.name) + "_")]
        self.add_error(PART_PREFIX + named[0] if named else None, exc.message)
