"""Run configuration: read a TOML file, check it, and return a :class:`RunConfig` (the entry point).

The schema is in :mod:`qmc.config.schema`; sections are parsed by :mod:`qmc.config.sections` and
:mod:`qmc.config.scan`, the scan is expanded into tasks by :mod:`qmc.config.tasks`, models are built by
:mod:`qmc.config.build`.  Every problem raises :class:`~qmc.errors.UserError` with
``where = "<file>: <key>"``, e.g. ``"configs/x.toml: terms[1].coupling"`` (``[[terms]]`` blocks are
numbered from 0 in order of appearance).  This module also offers the names callers need together:
``load_config``, ``RunConfig``, ``Task``, ``build_model``, ``validate``, ``config_fingerprint``.
"""

from __future__ import annotations

import os
import re
import tomllib
from pathlib import Path

from qmc.config.build import build_model, distinct_models, measures_with_loops, validate
from qmc.config.reader import TableReader
from qmc.config.run_config import RunConfig, config_fingerprint
from qmc.config.scan import check_names, parse_scan
from qmc.config.schema import HOME, SECTIONS
from qmc.config.sections import (
    parse_ground_state,
    parse_lattice,
    parse_model,
    parse_run,
    parse_sampling,
    parse_terms,
)
from qmc.config.tasks import Task
from qmc.config.walls import parse_domain_wall
from qmc.errors import UserError, did_you_mean

__all__ = ["RunConfig", "Task", "load_config", "build_model", "distinct_models", "validate",
           "measures_with_loops", "config_fingerprint"]


def load_config(path: str | os.PathLike) -> RunConfig:
    """Read, check and expand a configuration file; raises UserError naming file, key and problem."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise UserError("configuration file not found", str(path)) from None
    except OSError as exc:
        raise UserError(f"cannot read the configuration file: {exc.strerror or exc}", str(path)) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise UserError(f"the file is not UTF-8 text (byte {exc.start})", str(path)) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise _syntax_error(path, text, exc) from None
    config = _parse(TableReader(path, text, data))
    config.tasks()  # evaluates every expression for every task: all per-task errors surface here
    return config


def _parse(r: TableReader) -> RunConfig:
    for k in r.data:
        if k not in SECTIONS:
            hint = did_you_mean(k, SECTIONS)
            if not hint and k in HOME:
                hint = f" ('{k}' belongs in {HOME[k]})"
            raise r.fail(k, f"unknown section or top-level key '{k}'{hint}; the sections are "
                            "[run], [model], [lattice], [[terms]], [scan], [sampling], [exchange], "
                            "[ground_state] and [domain_wall]")
    run = parse_run(r)
    model = parse_model(r)
    lattice = parse_lattice(r)
    terms = parse_terms(r)
    ground_state = parse_ground_state(r)
    scan = parse_scan(r, ground_state is not None)
    sampling = parse_sampling(r)
    if ground_state is not None and sampling.exchange is not None:
        raise r.fail("ground_state", "[ground_state] and [exchange] cannot be combined: replica exchange "
                                     "runs its ladder at one fixed beta; remove one of the two sections")
    check_names(r, lattice, terms, scan, sampling, model)
    domain_wall = parse_domain_wall(r, lattice, sampling, terms)
    output_dir = Path(os.path.abspath(r.path.parent / Path(run.output).expanduser()))
    if output_dir.exists() and not output_dir.is_dir():
        raise r.fail("run.output", f"{output_dir} exists and is not a directory; choose another output")
    return RunConfig(path=r.path, text=r.text, data=r.data, run=run, lattice=lattice, terms=terms, scan=scan,
                     sampling=sampling, output_dir=output_dir, model=model, ground_state=ground_state,
                     domain_wall=domain_wall)


def _syntax_error(path: Path, text: str, exc: tomllib.TOMLDecodeError) -> UserError:
    msg = str(exc)
    m = re.search(r"\s*\(at line (\d+), column (\d+)\)\s*$", msg)
    lines = text.split("\n")
    if m:
        line, col = int(m.group(1)), int(m.group(2))
        msg = msg[: m.start()]
    else:
        msg = re.sub(r"\s*\(at end of document\)\s*$", "", msg) + " at the end of the file"
        line, col = len(lines), len(lines[-1]) + 1
    snippet = lines[line - 1].strip() if 0 < line <= len(lines) else ""
    shown = f" (the line reads: {snippet[:80]})" if snippet else ""
    return UserError(f"invalid TOML: {msg}{shown}", f"{path}: line {line}, column {col}")
