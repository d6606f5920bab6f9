"""One concept, one option: names, defaults and help agree across every command.

Walks the typer application's commands (click's parameter objects are the
outside reference for what the command line really accepts) and checks that

- a flag given by several commands has the same parameter name, short forms,
  default and help text everywhere;
- a parameter name is spelled with one flag everywhere (one concept, one name);
- every default equals the default of the options field it fills
  (:mod:`paths.workflows.options`, where defaults live), or of the workflow
  function's keyword for ``predict``;
- every option has a help text.

Deliberate exceptions are listed in ``EXCEPTIONS`` with the reason.
"""
from __future__ import annotations

import dataclasses
import inspect
from collections import defaultdict
from enum import Enum
from pathlib import Path

import pytest
import typer.main

from paths.cli import app
from paths.cli.flags import build
from paths.workflows import options as o

#: (flag or argument name, command) -> why it differs from the same flag elsewhere
EXCEPTIONS = {
    ("--format", "run"): "default None: the case file's [figures] formats",
    ("--format", "demo"): "default None: the case file's [figures] formats",
    ("--width", "run"): "default None: the case file's [figures] width",
    ("--width", "demo"): "default None: the case file's [figures] width",
    ("--out", "predict"): "predict writes one CSV file, not an output folder",
    ("--out", "run"): "default ./paths-CASE, named after the case (said in its help)",
    ("--id", "predict"): "carried into the predictions (default: the fit's identifier column)",
    ("--rule", "predict"): "picks one of the rules saved with the fit, not the rule to report",
    ("--target", "plan"): "the pilot's response, needed only with --pilot",
    ("--n-features", "plan"): "a planning input (default: the pilot's); simulate's is the truth",
    ("--snr", "plan"): "a planning input (or from --pilot); simulate's sets the truth",
    ("--noise-variance", "plan"): "a planning input (or from --pilot); simulate's sets the truth",
    ("data", "predict"): "new rows for a saved fit, not the data a fit is made on",
    ("case", "run"): "run's case is a required argument; demo's --case defaults to the demo",
}

#: flags not spelled as the options field (case-file key) they fill, and why
FLAG_SPELLINGS = {
    ("--format", "formats"): "one flag for one or several formats, comma-separated",
    ("--id", "id_column"): "short flag for an identifier column",
    ("--test", "test_file"): "short flag for the test table",
    ("--out", "out_dir"): "the output folder; not a case-file key (paths run --out)",
    ("--lambda", "lam"): "'lambda' is a Python keyword",
    ("--list", "list_"): "'list' is a Python builtin; not an options field",
}

#: the options dataclasses each command fills (paths/cli/<command>.py)
FILLS = {
    "explore": (o.DataOptions, o.FitOptions, o.EngineOptions, o.FigureOptions, o.OutputOptions),
    "threshold": (o.DataOptions, o.ThresholdOptions, o.FigureOptions, o.OutputOptions),
    "simulate": (o.TruthOptions, o.DrawOptions, o.ThresholdOptions, o.FigureOptions,
                 o.OutputOptions),
    "plan": (o.PlanOptions, o.DataOptions, o.OutputOptions),
    "run": (o.OutputOptions,),
    "demo": (o.OutputOptions,),
    "predict": (),
}


def _commands():
    return typer.main.get_command(app).commands


def _key(param) -> str:
    longs = [x for x in param.opts if x.startswith("--")]
    return longs[0] if longs else param.name


def _params():
    """[(command, param)] for every parameter of every command."""
    return [(name, p) for name, cmd in _commands().items() for p in cmd.params]


def _norm(v):
    return v.value if isinstance(v, Enum) else v


def test_the_commands_are_the_ones_audited():
    assert set(_commands()) == set(FILLS)


def test_every_option_has_help():
    missing = [(c, _key(p)) for c, p in _params()
               if getattr(p, "param_type_name", "") == "option" and not (p.help or "").strip()]
    assert missing == []


def test_one_flag_means_one_thing_everywhere():
    """Same flag: same parameter name, short forms, default and help (exceptions listed)."""
    by_flag = defaultdict(list)
    for cmd, p in _params():
        if (_key(p), cmd) not in EXCEPTIONS:
            by_flag[_key(p)].append((cmd, p))
    bad = []
    for flag, uses in by_flag.items():
        def spec(p, flag=flag):
            default = None if flag == "--out" else _norm(p.default)  # --out: below
            return (p.name, tuple(sorted(p.opts)), tuple(p.secondary_opts), repr(default),
                    p.help)
        specs = {spec(p) for _, p in uses}
        if len(specs) > 1:
            bad.append((flag, [(c, spec(p)) for c, p in uses]))
    assert bad == []


def test_one_concept_has_one_flag():
    """A parameter name is spelled with the same flag (or argument) in every command."""
    flags = defaultdict(set)
    for cmd, p in _params():
        if (_key(p), cmd) not in EXCEPTIONS:
            flags[p.name].add((_key(p), tuple(sorted(p.opts))))
    assert {k: v for k, v in flags.items() if len(v) > 1} == {}


def test_exceptions_are_still_needed():
    """Every listed exception names a flag the command has (no stale entries)."""
    have = {(_key(p), cmd) for cmd, p in _params()}
    assert set(EXCEPTIONS) <= have


@pytest.mark.parametrize("command", sorted(FILLS))
def test_defaults_are_the_options_defaults(command):
    """A parameter filling an options field defaults to that field's default (built the way
    the command builds it: paths.cli.flags.build); --out to the command's folder."""
    cmd = _commands()[command]
    bad, checked = [], 0
    for p in cmd.params:
        if p.name == "out_dir" and command != "predict":
            want = o.DEFAULT_OUT_DIRS.get(command)
            if (None if want is None else Path(want)) != p.default:
                bad.append((p.name, p.default, want))
            continue
        for cls in FILLS[command]:
            names = {f.name for f in dataclasses.fields(cls)}
            if p.name not in names or (command in ("run", "demo") and p.name != "force"):
                continue
            value = getattr(build(cls, {p.name: p.default}), p.name)
            checked += 1
            if value != getattr(cls(), p.name):
                bad.append((cls.__name__, p.name, p.default, getattr(cls(), p.name)))
    assert bad == []
    assert checked >= {"run": 1, "demo": 1, "predict": 0}.get(command, 5)


def test_predict_defaults_are_the_workflow_defaults():
    from paths.workflows.predict import predict_file

    sig = inspect.signature(predict_file).parameters
    cmd = _commands()["predict"]
    bad = [(p.name, p.default, sig[p.name].default) for p in cmd.params
           if p.name in sig and sig[p.name].default is not inspect.Parameter.empty
           and p.default != sig[p.name].default]
    assert bad == []


def test_demo_runs_the_demo_case_by_default():
    case = next(p for p in _commands()["demo"].params if p.name == "case")
    assert case.default == o.DEMO_CASE


def test_a_flag_is_its_field_spelled_with_dashes():
    """``--n-folds`` fills ``n_folds`` (a case file's key): one concept, one name in both
    places, but for the spellings listed in ``FLAG_SPELLINGS``."""
    odd = {(_key(p), p.name) for _, p in _params() if _key(p).startswith("--")
           and _key(p) != "--" + p.name.replace("_", "-")}
    assert odd == set(FLAG_SPELLINGS)
