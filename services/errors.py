"""The one exception the domain core raises for input a user must fix."""


class UnusableInput(Exception):
    """Input that cannot be checked: a broken file, absurd parameters, an unknown slug.

    ``code`` is a stable machine-readable key (``"stl_truncated"``, ``"zip_bomb"``);
    ``message`` is one sentence a user can act on. Never retried by workers.
    """

    def __init__(self, code: str, message: str) -> None:
        super().__init__(message)
        self.code = code
        self.message = message

    def __str__(self) -> str:
        return self.message
