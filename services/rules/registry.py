"""The rule families run on every layer stack, in order (the rules work adds to this list)."""

CHECKS: list = []
