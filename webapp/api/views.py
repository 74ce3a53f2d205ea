"""The account page where a user makes and revokes personal API tokens."""

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.shortcuts import redirect, render
from django.views.decorators.cache import never_cache

from webapp.api import selectors, services
from webapp.api.forms import TokenCreateForm, TokenRevokeForm


@login_required
@never_cache
def tokens(request):
    """List the user's tokens; make one (shown on this response only) or revoke one."""
    form, new_token = TokenCreateForm(), None
    if request.method == "POST" and "token" in request.POST:
        revoke = TokenRevokeForm(request.POST)
        if revoke.is_valid():
            token = selectors.api_token_get_for(user=request.user, public_id=revoke.cleaned_data["token"])
            services.api_token_revoke(token=token)
            messages.info(request, f"Token “{token.name}” revoked; scripts using it now get 401.")
        return redirect("api_tokens")
    if request.method == "POST":
        form = TokenCreateForm(request.POST)
        if form.is_valid():
            _, new_token = services.api_token_create(user=request.user, name=form.cleaned_data["name"])
            form = TokenCreateForm()
    context = {"form": form, "new_token": new_token, "tokens": selectors.api_token_list_for(user=request.user)}
    return render(request, "api/tokens.html", context, status=400 if form.errors else 200)
