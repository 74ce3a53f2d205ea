from django.apps import AppConfig


class AccountsConfig(AppConfig):
    name = "webapp.accounts"
    label = "accounts"
