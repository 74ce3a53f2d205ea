"""Forms of the account page for API tokens."""

from django import forms


class TokenCreateForm(forms.Form):
    name = forms.CharField(max_length=100, help_text="what will use it, e.g. 'CI on the lab server'")


class TokenRevokeForm(forms.Form):
    token = forms.UUIDField()
