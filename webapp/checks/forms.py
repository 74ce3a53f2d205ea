"""Forms of the designer's pages: they parse and explain, the services decide."""

from django import forms

from services.errors import UnusableInput
from services.intake import UNITS
from services.profiles import check_pairing
from services.settings import ORIENTATIONS, CheckSettings, OpticsSettings
from webapp.catalogue.selectors import material_list_active, printer_list_active


class CheckOptionsForm(forms.Form):
    printer = forms.ModelChoiceField(queryset=printer_list_active(), to_field_name="slug", empty_label=None)
    material = forms.ModelChoiceField(queryset=material_list_active(), to_field_name="slug", empty_label=None)
    orientation = forms.ChoiceField(choices=[(o, f"build axis {o}") for o in ORIENTATIONS], initial="+z")
    quantities = forms.CharField(initial="1, 5, 10, 25", help_text="comma-separated quantities to quote")
    freqs = forms.CharField(required=False, label="Design frequencies (GHz)",
                            help_text="140, or 110,140,170, or 110:170:7 (start:stop:points); empty: the material's band")
    focal_length_mm = forms.FloatField(required=False, min_value=0.001, label="Intended focal length (mm)",
                                       help_text="measured from the part's far extreme along the build axis")
    edge_taper_db = forms.FloatField(required=False, min_value=0.1, max_value=60, label="Edge taper (dB)",
                                     help_text="Gaussian illumination at the part's rim; empty: 10 dB")

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["printer"].queryset = printer_list_active()
        self.fields["material"].queryset = material_list_active()

    def clean(self):
        data = super().clean()
        from services.cli import parse_freqs

        try:
            quantities = tuple(int(q) for q in data.get("quantities", "").replace(" ", "").split(",") if q)
            optics = OpticsSettings(freqs_ghz=parse_freqs(data.get("freqs")), focal_length_mm=data.get("focal_length_mm"),
                                    edge_taper_db=data.get("edge_taper_db"))
            data["check_settings"] = CheckSettings(orientation=data.get("orientation", "+z"), quantities=quantities, optics=optics)
        except ValueError:
            self.add_error("quantities", "Give whole numbers separated by commas, e.g. 1, 5, 10, 25.")
        except UnusableInput as exc:
            field = {"bad_frequency": "freqs", "bad_quantity": "quantities"}.get(exc.code, None)
            self.add_error(field, exc.message)
        if data.get("printer") and data.get("material"):
            try:
                check_pairing(data["printer"].snapshot(), data["material"].snapshot())
            except UnusableInput as exc:
                self.add_error("material", exc.message)
        return data


class UploadForm(CheckOptionsForm):
    file = forms.FileField(help_text="STL, 3MF, OBJ or PLY; the format is read from the bytes")
    units = forms.ChoiceField(choices=[("", "not stated (mm, flagged if implausible)")] + [(u, u) for u in UNITS],
                              required=False, help_text="for STL, OBJ and PLY, which carry no units; 3MF states its own")

    field_order = ["file", "units", "printer", "material"]
