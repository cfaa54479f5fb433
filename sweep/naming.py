"""Readable configuration names, derived from the spec: what every report calls a configuration.

A configuration of a model block is named after the block and the parameters
that vary inside that block, in the order of the block's grid::

    fuzzy · choquet · sugeno_lambda · labels=3      (text values bare, others as name=value)
    tree · max_depth=3
    knn                                              (a block with one configuration: its name)

A parameter that does not apply to a configuration (``applies`` in the spec:
a ``measure`` under additive reasoning, held at its default) is not shown and
has no value in the reports, so a filter ``measure=power`` does not match it.

A block can name its configurations itself: ``label = "FRM {reasoning} {measure}"``
(a template; a parameter that does not apply formats as an empty string, and
runs of spaces collapse), or ``names = [ { name = "WR", reasoning = "winning_rule" } ]``
(the first matching entry names a configuration; before the template). Names are
unique in a sweep: derived names that would collide fall back to ``name=value`` for
every part and then get the configuration id appended; names given in the spec
that collide are refused (:class:`~sweep.errors.SpecError`).

Pure: spec and plan in, names out.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any, Mapping

from sweep.errors import SpecError

SEPARATOR = " · "


@dataclass(frozen=True)
class ConfigName:
    """How reports show one configuration."""

    config_id: str
    #: unique readable name
    name: str
    #: the model block's name
    model: str
    worker: str
    #: the parameters that apply to it (all of them, defaults included), in canonical order
    params: Mapping[str, Any]
    #: the parameters that vary inside its block (what the derived name shows), in grid order
    varying: tuple[str, ...]
    #: parameters that do not apply to it (held at their default; not shown, never matched)
    inapplicable: frozenset[str]


def name_configurations(spec: Any, plan: Any) -> dict[str, ConfigName]:
    """config_id -> :class:`ConfigName` for every configuration of ``plan`` (in plan order)."""
    blocks = {b.label: b for b in spec.models}
    by_block: dict[str, list[Any]] = {}
    for config in plan.configurations:
        by_block.setdefault(config.label, []).append(config)
    out: dict[str, ConfigName] = {}
    given: dict[str, str] = {}  # names the spec gave -> config id (collisions are the spec's error)
    for label, configs in by_block.items():
        block = blocks.get(label)
        hidden = {c.config_id: _inapplicable(block, c.params) for c in configs}
        shown = {c.config_id: {k: v for k, v in c.params.items() if k not in hidden[c.config_id]} for c in configs}
        varying = _varying(block, configs, shown)
        derived = _derived(label, configs, shown, varying)
        for c in configs:
            name = _given(block, c.params, shown[c.config_id])
            if name is not None:
                if name in given and given[name] != c.config_id:
                    raise SpecError(f"{spec.path}: model {label!r}: configurations {given[name]} and {c.config_id} "
                                    f"are both named {name!r}; names must be unique (add a parameter to the "
                                    "label template or a names entry)")
                given[name] = c.config_id
            out[c.config_id] = ConfigName(c.config_id, name or derived[c.config_id], label, c.worker,
                                          shown[c.config_id], varying, frozenset(hidden[c.config_id]))
    return _unique(out, given, spec)


def _inapplicable(block: Any, params: Mapping[str, Any]) -> set[str]:
    if block is None:
        return set()
    return {target for target, condition in block.applies.items() if not _matches(condition, params)}


def _matches(rule: Mapping[str, tuple[Any, ...]], params: Mapping[str, Any]) -> bool:
    return all(params.get(name) in values for name, values in rule.items())


def _varying(block: Any, configs: list[Any], shown: Mapping[str, Mapping[str, Any]]) -> tuple[str, ...]:
    order = list(block.grid) if block is not None else []
    order += sorted({k for c in configs for k in c.params} - set(order))
    return tuple(k for k in order
                 if len({repr(shown[c.config_id].get(k, _ABSENT)) for c in configs}) > 1)


_ABSENT = object()


def _derived(label: str, configs: list[Any], shown: Mapping[str, Mapping[str, Any]],
             varying: tuple[str, ...]) -> dict[str, str]:
    def name(cid: str, bare_text: bool) -> str:
        parts = [label]
        for k in varying:
            if k in shown[cid]:
                v = shown[cid][k]
                parts.append(str(v) if bare_text and isinstance(v, str) else f"{k}={v}")
        return SEPARATOR.join(parts)

    short = {c.config_id: name(c.config_id, True) for c in configs}
    if len(set(short.values())) == len(short):
        return short
    return {c.config_id: name(c.config_id, False) for c in configs}


def _given(block: Any, params: Mapping[str, Any], shown: Mapping[str, Any]) -> str | None:
    if block is None:
        return None
    for name, rule in block.names:
        if _matches(rule, params):
            return name
    if block.name_template is not None:
        values = {k: (shown[k] if k in shown else "") for k in params}
        return re.sub(r"\s{2,}", " ", block.name_template.format(**values)).strip()
    return None


def _unique(out: dict[str, ConfigName], given: Mapping[str, str], spec: Any) -> dict[str, ConfigName]:
    """Derived names that collide (across blocks, or with a given name) get their id appended."""
    count: dict[str, int] = {}
    for n in out.values():
        count[n.name] = count.get(n.name, 0) + 1
    fixed = {}
    for cid, n in out.items():
        if count[n.name] > 1 and given.get(n.name) != cid:
            n = ConfigName(cid, f"{n.name} [{cid}]", n.model, n.worker, n.params, n.varying, n.inapplicable)
        fixed[cid] = n
    return fixed
