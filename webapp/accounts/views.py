"""Sign-in with a limit on failed attempts."""

from django.contrib.auth import views as auth_views

from webapp.accounts.ratelimit import LoginThrottle, client_address


class LoginView(auth_views.LoginView):
    """Django's sign-in view, refusing to check passwords once a user name or address failed too often."""

    def post(self, request, *args, **kwargs):
        throttle = LoginThrottle()
        if throttle.blocked(username=request.POST.get("username", ""), address=client_address(request)):
            # No password is checked while blocked, so guessing gains nothing until the window ends.
            context = self.get_context_data(form=self.get_form_class()(request), throttled=throttle.sentence())
            return self.render_to_response(context, status=429)
        return super().post(request, *args, **kwargs)

    def form_valid(self, form):
        LoginThrottle().succeeded(username=form.get_user().get_username())
        return super().form_valid(form)

    def form_invalid(self, form):
        LoginThrottle().failed(username=self.request.POST.get("username", ""), address=client_address(self.request))
        return super().form_invalid(form)
