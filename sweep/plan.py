"""The plan: grid × datasets × repeats × folds expanded into jobs with stable keys.

Pure: a spec and the datasets' fingerprints in, configurations and jobs out;
no I/O. A configuration's identity is its worker and its *complete*
parameters (declared defaults filled in, keys sorted), so the same
parameters written in another order, or a default written out, give the
same configuration id. A job key hashes the dataset fingerprint, the fold
scheme, the repeat and fold, the configuration id and the worker's version:
growing a grid adds keys and never changes the existing ones.
"""

from __future__ import annotations

import hashlib
import itertools
import json
from dataclasses import dataclass
from functools import cached_property
from typing import Any, Mapping, NamedTuple

from sweep.errors import SpecError
from sweep.spec import ModelBlock, Spec


@dataclass(frozen=True)
class Configuration:
    """One point of a model block's grid."""

    #: short stable id: a hash of the worker name and the complete parameters
    config_id: str
    worker: str
    worker_version: str
    #: the model block's name
    label: str
    #: complete canonical parameters, sorted by name
    params: Mapping[str, Any]
    #: their canonical JSON text (what the id hashes, and what the tracker stores)
    canonical: str = ""


class PlannedJob(NamedTuple):
    """One (dataset, configuration, repeat, fold) and its key (a named tuple: plans hold ~10^5 of them)."""

    key: str
    dataset: str
    fingerprint: str
    config_id: str
    repeat: int
    fold: int
    #: the fold scheme of an inner job (sweep.nested.inner_scheme); "" for an outer job (the plan's scheme)
    scheme: str = ""


@dataclass(frozen=True)
class Plan:
    """Configurations, the datasets' fingerprints and the fold scheme; jobs are expanded on first use."""

    configurations: tuple[Configuration, ...]
    #: (dataset name, fingerprint), in spec order
    datasets: tuple[tuple[str, str], ...]
    scheme: str
    repeats: int
    k: int
    #: inner folds per outer training part ([selection] inner_k); 0 without nested selection
    inner_k: int = 0
    #: (model block label, its configuration ids in grid order), in spec order
    blocks: tuple[tuple[str, tuple[str, ...]], ...] = ()

    @cached_property
    def jobs(self) -> tuple[PlannedJob, ...]:
        """Every job: datasets × configurations × repeats × folds, in that order."""
        folds = [(r, f) for r in range(self.repeats) for f in range(self.k)]
        return tuple(PlannedJob(job_key(fp, self.scheme, r, f, c.config_id, c.worker_version), name, fp,
                                c.config_id, r, f)
                     for name, fp in self.datasets for c in self.configurations for r, f in folds)

    @cached_property
    def inner_jobs(self) -> tuple[PlannedJob, ...]:
        """The inner jobs of nested selection (none without it): datasets × configurations × repeats ×
        outer folds × inner folds; ``fold`` numbers them as sweep.nested.inner_number does."""
        if not self.inner_k:
            return ()
        from sweep.nested import inner_number, inner_scheme

        scheme = inner_scheme(self.scheme, self.inner_k)
        folds = [(r, inner_number(f, i, self.inner_k)) for r in range(self.repeats) for f in range(self.k)
                 for i in range(self.inner_k)]
        return tuple(PlannedJob(job_key(fp, scheme, r, n, c.config_id, c.worker_version), name, fp,
                                c.config_id, r, n, scheme)
                     for name, fp in self.datasets for c in self.configurations for r, n in folds)

    @property
    def all_jobs(self) -> tuple[PlannedJob, ...]:
        """Outer jobs, then inner jobs: what the tracker holds for this plan."""
        return self.jobs + self.inner_jobs if self.inner_k else self.jobs

    @cached_property
    def by_config(self) -> dict[str, Configuration]:
        return {c.config_id: c for c in self.configurations}

    @property
    def jobs_per_cell(self) -> int:
        return self.repeats * self.k


def canonical_json(params: Mapping[str, Any]) -> str:
    """The canonical text of a parameter set (sorted keys, no spaces)."""
    return json.dumps(dict(params), sort_keys=True, separators=(",", ":"))


def config_id(worker: str, params: Mapping[str, Any], canonical: str | None = None) -> str:
    """Short stable id of a configuration: worker name + complete parameters."""
    text = worker + "|" + (canonical if canonical is not None else canonical_json(params))
    return hashlib.sha256(text.encode()).hexdigest()[:10]


def job_key(fingerprint: str, scheme: str, repeat: int, fold: int, config: str, version: str) -> str:
    """Stable key of one fold job (see the module docstring for what it covers)."""
    text = f"{fingerprint}|{scheme}|{repeat}|{fold}|{config}|{version}"
    return hashlib.sha256(text.encode()).hexdigest()[:20]


def expand_block(block: ModelBlock, declared: Mapping[str, Any], version: str) -> list[Configuration]:
    """Every configuration of one model block, in grid order, without duplicates."""
    names = list(block.grid)
    seen: dict[str, Configuration] = {}
    for values in itertools.product(*(block.grid[n] for n in names)):
        point = {name: param.default for name, param in declared.items()}
        point.update(block.fixed)
        point.update(zip(names, values))
        if any(_matches(rule, point) for rule in block.exclude):
            continue
        for target, condition in block.applies.items():
            if not _matches(condition, point):
                point[target] = block.fixed.get(target, declared[target].default)
        params = dict(sorted(point.items()))
        text = canonical_json(params)
        cid = config_id(block.worker, params, text)
        seen.setdefault(cid, Configuration(cid, block.worker, version, block.label, params, text))
    return list(seen.values())


def _matches(rule: Mapping[str, tuple[Any, ...]], point: Mapping[str, Any]) -> bool:
    return all(point.get(name) in values for name, values in rule.items())


def make_plan(spec: Spec, fingerprints: Mapping[str, str], workers: Mapping[str, Any]) -> Plan:
    """Expand ``spec`` into configurations and jobs.

    ``fingerprints`` maps dataset name to content fingerprint, ``workers``
    maps worker name to its :class:`workers.registry.Worker`.
    """
    configurations: dict[str, Configuration] = {}
    blocks = []
    for i, block in enumerate(spec.models):
        worker = workers[block.worker]
        expanded = expand_block(block, worker.params, worker.version)
        if not expanded:
            raise SpecError(f"{spec.path}: model[{i}] {block.label!r}: the grid is empty after its exclude rules")
        for config in expanded:
            configurations.setdefault(config.config_id, config)
        blocks.append((block.label, tuple(c.config_id for c in expanded)))
    datasets = tuple((entry["name"], fingerprints[entry["name"]]) for entry in spec.datasets)
    inner_k = spec.selection.inner_k if spec.selection is not None else 0
    return Plan(tuple(configurations.values()), datasets, spec.folds.key, spec.folds.repeats, spec.folds.k,
                inner_k, tuple(blocks))
