"""SCPI command headers: whether a header as sent names a command as documented.

A header node has a long form (``VOLTage``) and a short form (its capital letters,
``VOLT``); an instrument accepts either, in any letter case, but nothing in between, and
a node in brackets may be left out (SCPI-1999 volume 1). The simulated instruments
match what they receive against their documented patterns with `header_matches`; the
patterns' nodes and forms are worked out once per distinct text and cached. Import it
through `pnbench.drivers.scpi`.
"""

from __future__ import annotations

import re
from functools import lru_cache

_NODE = re.compile(r"([A-Z0-9_]*)([a-z0-9_]*)")


@lru_cache(maxsize=4096)
def _pattern_nodes(pattern: str) -> tuple[tuple[str, bool], ...]:
    """(mnemonic, optional) pairs of a header pattern such as ``:SOURce[:LEVel]``."""
    nodes: list[tuple[str, bool]] = []
    i = 0
    text = pattern.strip()
    while i < len(text):
        ch = text[i]
        if ch == "[":
            end = text.find("]", i)
            if end < 0:
                raise ValueError(f"unclosed [ in header pattern {pattern!r}")
            inner = text[i + 1 : end].strip(":")
            if not inner or ":" in inner:
                raise ValueError(f"an optional part must be one node: {pattern!r}")
            nodes.append((inner, True))
            i = end + 1
        elif ch == ":":
            i += 1
        else:
            end = i
            while end < len(text) and text[end] not in ":[":
                end += 1
            nodes.append((text[i:end], False))
            i = end
    return tuple(nodes)


@lru_cache(maxsize=4096)
def _node_forms(mnemonic: str) -> tuple[str, str]:
    """(long, short) upper-case forms: the short form is the leading capitals/digits."""
    match = _NODE.match(mnemonic)
    short = match.group(1) if match and match.group(1) else mnemonic
    # trailing digits after lowercase letters (OUTPut2) belong to both forms
    digits = re.search(r"[0-9]+$", mnemonic)
    if digits and not short.endswith(digits.group(0)):
        short += digits.group(0)
    return mnemonic.upper(), short.upper()


def _match_nodes(nodes: tuple[tuple[str, bool], ...], words: list[str]) -> bool:
    if not nodes:
        return not words
    (mnemonic, optional), rest = nodes[0], nodes[1:]
    if words and words[0].upper() in _node_forms(mnemonic):
        if _match_nodes(rest, words[1:]):
            return True
    return optional and _match_nodes(rest, words)


def header_matches(pattern: str, header: str) -> bool:
    """Whether `header` (as sent) names the command `pattern` (as documented).

    ``:SOURce:VOLTage[:LEVel]`` matches ``:SOUR:VOLT``, ``source:voltage:level`` and
    ``:SOUR:VOLT:LEV``; a leading colon is optional on both sides; a trailing ``?`` must be
    on both or neither. Common commands (``*IDN?``) compare without regard to case.
    """
    pattern = pattern.strip()
    header = header.strip()
    if pattern.endswith("?") != header.endswith("?"):
        return False
    pattern = pattern.rstrip("?")
    header = header.rstrip("?")
    if pattern.startswith("*") or header.startswith("*"):
        return pattern.upper() == header.upper()
    words = header.lstrip(":").split(":")
    if not header or any(not w for w in words):
        return False
    return _match_nodes(_pattern_nodes(pattern), words)
