"""Topic levels from ids: the one mapping every MQTT-based sink uses for site/line/station.

A topic level is a *slug*: lower-case letters, digits, ``-`` and ``_``. The mapping is
documented (docs/gateway-config.md) so a subscriber can compute it too:

    lower-case the id; every character other than a-z, 0-9, ``-`` and ``_`` becomes ``-``.

``"Northmere Works"`` → ``northmere-works``, ``"L1-S1"`` → ``l1-s1``, ``"Zone 3/A"`` →
``zone-3-a``. Two ids that map to one slug would share a topic, so ``check_slugs`` refuses
them when the config is checked. Display names travel in payloads and retained metadata.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping

__all__ = ["check_slugs", "slug", "station_slugs"]

_OTHER = re.compile(r"[^a-z0-9_-]")


def slug(name: str) -> str:
    """The topic level for an id (see the module doc); ValueError for an empty result."""
    out = _OTHER.sub("-", name.lower())
    if not out.strip("-_"):
        raise ValueError(f"{name!r} gives no usable topic level (it needs a letter or digit)")
    return out


def check_slugs(what: str, names: Iterable[str]) -> dict[str, str]:
    """name → slug for distinct names; ValueError (one line) when two names share a slug."""
    seen: dict[str, str] = {}
    out: dict[str, str] = {}
    for name in sorted(set(names)):
        s = slug(name)
        if s in seen:
            raise ValueError(
                f"{what} {seen[s]!r} and {name!r} both map to topic level {s!r}; rename one "
                f"(or set topic_style = \"names\")"
            )
        seen[s] = name
        out[name] = s
    return out


def station_slugs(stations: Mapping[str, str]) -> tuple[dict[str, str], dict[str, str]]:
    """(line → slug, station → slug) for a station → line map, collisions refused."""
    return check_slugs("lines", stations.values()), check_slugs("stations", stations)
