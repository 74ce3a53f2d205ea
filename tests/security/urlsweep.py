"""Walk Django's URL resolver and fill each route's parameters, so new URLs are covered without new tests."""

from __future__ import annotations

import itertools
import re
import uuid
from dataclasses import dataclass

from django.urls import URLPattern, URLResolver, get_resolver
from django.urls.resolvers import RegexPattern

_PARAM = re.compile(r"<(?:(?P<conv>[^>:]+):)?(?P<name>[^>]+)>")
_GROUP = re.compile(r"\(\?P<(?P<name>\w+)>(?P<body>[^()]*)\)")
MAX_URLS_PER_ROUTE = 40


@dataclass(frozen=True)
class Route:
    """One URL pattern as a route string ("checks/<uuid:public_id>/"), with its name and how it was written."""

    route: str
    name: str | None
    regex: bool
    module: str = ""

    @property
    def is_admin(self) -> bool:
        return self.route.startswith("admin/")


def routes() -> list[Route]:
    """Return every URL pattern of the project, nested includes flattened."""
    found: list[Route] = []

    def walk(patterns, prefix: str, regex: bool) -> None:
        for p in patterns:
            is_regex = regex or isinstance(p.pattern, RegexPattern)
            part = str(p.pattern)
            if isinstance(p.pattern, RegexPattern):
                part = part.lstrip("^").rstrip("$").replace("\\Z", "")
            if isinstance(p, URLResolver):
                walk(p.url_patterns, prefix + part, is_regex)
            elif isinstance(p, URLPattern):
                found.append(Route(prefix + part, p.name, is_regex, getattr(p.callback, "__module__", "") or ""))

    walk(get_resolver().url_patterns, "", False)
    return found


@dataclass
class Candidates:
    """Values to put into URL parameters, by kind: ids of alice's objects and the site's shared names."""

    uuids: list[str]
    ints: list[str]
    words: list[str]

    def for_param(self, converter: str | None, name: str) -> list[str]:
        if converter in ("uuid", "uuidstr") or name.endswith("public_id"):
            return self.uuids
        if converter == "int" or (converter == "path" and name == "object_id"):
            return self.ints
        return self.words


def fill(route: Route, values: Candidates) -> list[str]:
    """Return concrete paths for a route, one per combination of candidate values (capped)."""
    if route.regex:
        return [_fill_regex(route.route, values)]
    params = list(_PARAM.finditer(route.route))
    choices = [values.for_param(m["conv"], m["name"]) for m in params]
    paths = []
    for combo in itertools.islice(itertools.product(*choices), MAX_URLS_PER_ROUTE):
        path, end = "", 0
        for m, value in zip(params, combo):
            path += route.route[end:m.start()] + value
            end = m.end()
        paths.append("/" + path + route.route[end:])
    return paths


def _fill_regex(route: str, values: Candidates) -> str:
    """Fill a regex route: a named group takes its first alternative, or a candidate, or a plain word."""

    def group(m: re.Match) -> str:
        body = m["body"]
        if "|" in body or re.fullmatch(r"[\w-]+", body):
            return body.split("|")[0]
        return (values.ints or ["1"])[0] if "d" in body else "x"

    path = _GROUP.sub(group, route)
    path = re.sub(r"<(?:\w+:)?(\w+)>", lambda m: (values.ints or ["1"])[0], path)
    path = re.sub(r"\.\*|\.\+", "no-such-page", path)
    return "/" + re.sub(r"[\^$?]", "", path).replace("\\", "")


def stranger_version(path: str, owned: list[str]) -> str:
    """Return the path with each of the owner's ids replaced by a fresh one that names nothing."""
    for value in owned:
        fresh = str(uuid.uuid4()) if "-" in value else "987654321"
        path = re.sub(rf"(?<![\w-]){re.escape(value)}(?![\w-])", fresh, path)
    return path


def names_any(path: str, values: list[str]) -> bool:
    """Return True when one of the path's segments is one of the values (an id, not a digit inside a word)."""
    return bool(set(path.split("/")) & set(values))
