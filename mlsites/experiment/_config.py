"""Experiment files: TOML, validated in full before any work starts.

An experiment file has sections of our own naming (``[study]``, ``[inputs]``,
``[distances]``, ``[terrain]``, ``[sites]``, ``[sampling]``, ``[folds]``,
``[learners]``, ``[evaluation]``, ``[outputs]``). Paths are relative to the file
that names them. ``extends = "base.toml"`` at the top merges the file over a base
file, so a study keeps one base and many variants. All problems are collected and
reported together, each with the file, the key (and line where known) and a hint.
"""

from __future__ import annotations

import copy
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

from mlsites.errors import ConfigError

__all__ = ["SCHEMA", "Experiment", "load_experiment", "experiment_from_dict", "experiment_from_flags"]

_NUM = (int, float)

# section -> key -> (accepted types, default, is_path). ``dict`` sections whose keys
# are user names (layers, learners) are listed in _NAMED_SECTIONS.
SCHEMA: dict[str, dict[str, tuple]] = {
    "study": {
        "name": (str, None, False),
        "dem": (str, None, True),
        "seed": (int, 0, False),
        "description": (str, "", False),
    },
    "terrain": {
        "layers": (list, ["slope", "aspect", "northness", "eastness", "tpi", "ruggedness", "roughness",
                          "profile_curvature", "plan_curvature", "landform", "stream_distance",
                          "height_above_drainage"], False),
        "tpi_radii_m": (list, [100.0, 500.0], False),
        "landform_lookup_cells": (int, 20, False),
        "landform_flatness_deg": (_NUM, 1.0, False),
        "stream_threshold_km2": (_NUM, 0.5, False),
        "stream_lines": (str, None, True),
    },
    "sites": {
        "path": (str, None, True),
        "layer": (str, None, False),
        "id_field": (str, "site_id", False),
        "x_field": (str, None, False),
        "y_field": (str, None, False),
        "crs": (str, None, False),
        "start_field": (str, None, False),
        "end_field": (str, None, False),
        "kind_field": (str, None, False),
        "certainty_field": (str, None, False),
    },
    "sampling": {
        "site_buffer_m": (_NUM, 0.0, False),
        "one_cell_per_site": (bool, False, False),
        "background_count": (int, 10000, False),
        "background_fraction": (_NUM, None, False),
        "exclusion_m": (_NUM, 0.0, False),
        "survey_areas": (str, None, True),
        "survey_mode": (str, "inside", False),
        "effort_field": (str, None, False),
    },
    "folds": {
        "method": (str, "square_blocks", False),
        "n_splits": (int, 5, False),
        "block_size_m": (_NUM, None, False),
        "buffer_m": (_NUM, None, False),
    },
    "evaluation": {
        "zone_targets": (dict, {"high": 0.7, "medium": 0.9}, False),
        "top_area_shares": (list, [0.1, 0.2, 0.33], False),
    },
    "outputs": {
        "runs_dir": (str, "runs", True),
        "models_dir": (str, "models", True),
    },
    "maps": {
        "learners": ((str, list), "best_and_baseline", False),
    },
}
#: Sections whose keys are names chosen by the user, each a table of settings.
_NAMED_SECTIONS = {
    # name = { path = "...", kind = "continuous" | "categorical" }
    "inputs": {"path": (str, None, True), "kind": (str, "continuous", False), "band": (int, 1, False)},
    # name = "path/to/vector"  -> distance_<name> layer
    "distances": None,
    # [learners] use = [...]; [learners.<name>] settings passed to the preset
    "learners": None,
}
FOLD_METHODS = ("square_blocks", "hexagon_blocks", "buffered_leave_one_out", "environmental", "random")
SURVEY_MODES = ("inside", "weighted")
#: Which learners a run maps: the best and the fuzzy baseline, the best only, all, none.
MAP_CHOICES = ("best_and_baseline", "best", "all", "none")
LAYER_KINDS = ("continuous", "categorical")


@dataclass(frozen=True)
class Experiment:
    """A validated experiment: the resolved settings and where they came from.

    ``settings`` is a plain nested dict with every section filled with defaults and
    every path made absolute; ``sources`` lists the files merged (base first).
    """

    name: str
    path: Path
    settings: dict
    sources: tuple

    def __getitem__(self, section):
        return self.settings[section]


def _line_of(text: str, key: str) -> int | None:
    m = re.search(rf"^\s*\"?{re.escape(key)}\"?\s*=", text, flags=re.M)
    if m is None:
        m = re.search(rf"^\s*\[\s*{re.escape(key)}\s*\]", text, flags=re.M)
    return text.count("\n", 0, m.start()) + 1 if m else None


def _read_toml(path: Path, chain: tuple) -> tuple[dict, tuple]:
    if not path.exists():
        raise ConfigError(f"{path}: experiment file not found")
    if path in chain:
        raise ConfigError(f"{path}: 'extends' forms a loop ({' -> '.join(str(p) for p in chain + (path,))})")
    text = path.read_text(encoding="utf-8")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}; fix the line named") from None
    _absolutise(data, path.parent, text, path)
    base = data.pop("extends", None)
    if base is None:
        return data, chain + (path,)
    if not isinstance(base, str):
        raise ConfigError(f"{path}: 'extends' must be a file name (string), got {base!r}")
    base_data, sources = _read_toml((path.parent / base).resolve(), chain + (path,))
    return _merge(base_data, data), _order(sources, path)


def _order(sources, path):
    return tuple(p for p in sources if p != path) + (path,)


def _merge(base: dict, over: dict) -> dict:
    out = copy.deepcopy(base)
    for k, v in over.items():
        out[k] = _merge(out[k], v) if isinstance(v, dict) and isinstance(out.get(k), dict) else v
    return out


def _absolutise(data: dict, folder: Path, text: str, path: Path):
    """Make every path value absolute relative to the file that wrote it."""
    for section, keys in SCHEMA.items():
        for key, (_, _, is_path) in keys.items():
            if is_path and isinstance(data.get(section), dict) and isinstance(data[section].get(key), str):
                data[section][key] = str((folder / data[section][key]).resolve())
    for name, spec in (data.get("inputs") or {}).items():
        if isinstance(spec, dict) and isinstance(spec.get("path"), str):
            spec["path"] = str((folder / spec["path"]).resolve())
        elif isinstance(spec, str):
            data["inputs"][name] = {"path": str((folder / spec).resolve())}
    for name, p in (data.get("distances") or {}).items():
        if isinstance(p, str):
            data["distances"][name] = str((folder / p).resolve())


def _type_name(t):
    if isinstance(t, tuple) and t is not _NUM:
        return " or ".join(_type_name(x) for x in t)
    if t is _NUM:
        return "number"
    return {str: "text", int: "whole number", bool: "true/false", list: "list", dict: "table"}.get(t, str(t))


def _check_type(value, types):
    if types is _NUM:
        return isinstance(value, _NUM) and not isinstance(value, bool)
    if types is int:
        return isinstance(value, int) and not isinstance(value, bool)
    return isinstance(value, types)


def experiment_from_dict(data: dict, *, path: Path, text: str = "", sources=()) -> Experiment:
    """Validate a merged experiment dict (paths already absolute) into an :class:`Experiment`."""
    problems: list[str] = []

    def bad(key, msg):
        line = _line_of(text, key.split(".")[-1]) if text else None
        where = f"{path}:{line}" if line else f"{path}"
        problems.append(f"{where}: [{key}] {msg}")

    settings: dict = {}
    for section in data:
        if section not in SCHEMA and section not in _NAMED_SECTIONS:
            choices = ", ".join(sorted(set(SCHEMA) | set(_NAMED_SECTIONS)))
            bad(section, f"unknown section or key; sections are {choices}")
    for section, keys in SCHEMA.items():
        given = data.get(section, {})
        if not isinstance(given, dict):
            bad(section, "must be a table")
            given = {}
        out = {}
        for key, value in given.items():
            if key not in keys:
                bad(f"{section}.{key}", f"unknown key; keys of [{section}] are {', '.join(keys)}")
                continue
            types = keys[key][0]
            if not _check_type(value, types):
                bad(f"{section}.{key}", f"expected {_type_name(types)}, got {value!r}")
                continue
            out[key] = value
        for key, (_, default, _) in keys.items():
            out.setdefault(key, copy.deepcopy(default))
        settings[section] = out
    settings["inputs"] = _check_inputs(data.get("inputs", {}), bad)
    settings["distances"] = _check_distances(data.get("distances", {}), bad)
    settings["learners"] = _check_learners(data.get("learners", {}), bad)
    _check_values(settings, bad)
    if problems:
        raise ConfigError(f"{len(problems)} problem(s) in the experiment:\n" + "\n".join(problems))
    name = settings["study"]["name"] or path.stem
    return Experiment(name=name, path=path, settings=settings, sources=tuple(sources) or (path,))


def _check_inputs(inputs, bad):
    out = {}
    if not isinstance(inputs, dict):
        bad("inputs", "must be a table of name = { path = ..., kind = ... }")
        return out
    for name, spec in inputs.items():
        if not isinstance(spec, dict):
            bad(f"inputs.{name}", "expected { path = \"...\", kind = \"continuous\" or \"categorical\" }")
            continue
        clean = {}
        for key, value in spec.items():
            allowed = _NAMED_SECTIONS["inputs"]
            if key not in allowed:
                bad(f"inputs.{name}.{key}", f"unknown key; keys are {', '.join(allowed)}")
            elif not _check_type(value, allowed[key][0]):
                bad(f"inputs.{name}.{key}", f"expected {_type_name(allowed[key][0])}, got {value!r}")
            else:
                clean[key] = value
        clean.setdefault("kind", "continuous")
        clean.setdefault("band", 1)
        if "path" not in clean:
            bad(f"inputs.{name}", "missing path")
        elif not Path(clean["path"]).exists():
            bad(f"inputs.{name}.path", f"file not found: {clean['path']}")
        if clean["kind"] not in LAYER_KINDS:
            bad(f"inputs.{name}.kind", f"{clean['kind']!r} is not one of {', '.join(LAYER_KINDS)}")
        out[name] = clean
    return out


def _check_distances(distances, bad):
    out = {}
    if not isinstance(distances, dict):
        bad("distances", "must be a table of name = \"path to a vector layer\"")
        return out
    for name, p in distances.items():
        if not isinstance(p, str):
            bad(f"distances.{name}", f"expected a path, got {p!r}")
        elif not Path(p).exists():
            bad(f"distances.{name}", f"file not found: {p}")
        elif not re.match(r"^[a-z][a-z0-9_]*$", name):
            bad(f"distances.{name}", "names are lower case letters, digits and underscores")
        else:
            out[name] = p
    return out


def _check_learners(learners, bad):
    from mlsites.learners import LEARNERS

    if not isinstance(learners, dict):
        bad("learners", "must be a table")
        return {"use": list(LEARNERS), "settings": {}}
    use = learners.get("use", list(LEARNERS))
    if not isinstance(use, list) or not all(isinstance(u, str) for u in use):
        bad("learners.use", f"expected a list of learner names, got {use!r}")
        use = []
    for u in use:
        if u not in LEARNERS:
            bad("learners.use", f"unknown learner {u!r}; choose from {', '.join(LEARNERS)}")
    settings = {}
    for key, value in learners.items():
        if key == "use":
            continue
        if key not in LEARNERS:
            bad(f"learners.{key}", f"unknown learner; choose from {', '.join(LEARNERS)}")
        elif not isinstance(value, dict):
            bad(f"learners.{key}", "expected a table of settings")
        else:
            settings[key] = value
    return {"use": use, "settings": settings}


def _check_values(s, bad):
    st = s["study"]
    if not st["dem"]:
        bad("study.dem", "missing; give the DEM file")
    elif not Path(st["dem"]).exists():
        bad("study.dem", f"file not found: {st['dem']}")
    if s["sites"]["path"] and not Path(s["sites"]["path"]).exists():
        bad("sites.path", f"file not found: {s['sites']['path']}")
    if s["terrain"]["stream_lines"] and not Path(s["terrain"]["stream_lines"]).exists():
        bad("terrain.stream_lines", f"file not found: {s['terrain']['stream_lines']}")
    sa = s["sampling"]
    if sa["survey_areas"] and not Path(sa["survey_areas"]).exists():
        bad("sampling.survey_areas", f"file not found: {sa['survey_areas']}")
    if sa["survey_mode"] not in SURVEY_MODES:
        bad("sampling.survey_mode", f"{sa['survey_mode']!r} is not one of {', '.join(SURVEY_MODES)}")
    if sa["survey_mode"] == "weighted" and not sa["effort_field"]:
        bad("sampling.effort_field", "survey_mode = \"weighted\" needs effort_field, the column of survey effort")
    if sa["site_buffer_m"] < 0 or sa["exclusion_m"] < 0:
        bad("sampling.site_buffer_m", "distances must be zero or positive")
    if sa["background_count"] is not None and sa["background_count"] < 1:
        bad("sampling.background_count", "must be at least 1")
    if sa["background_fraction"] is not None and not 0 < sa["background_fraction"] <= 1:
        bad("sampling.background_fraction", "must be in (0, 1]")
    fo = s["folds"]
    if fo["method"] not in FOLD_METHODS:
        bad("folds.method", f"{fo['method']!r} is not one of {', '.join(FOLD_METHODS)}")
    if fo["n_splits"] < 2:
        bad("folds.n_splits", "at least 2 folds are needed")
    if fo["method"] in ("square_blocks", "hexagon_blocks") and fo["block_size_m"] is not None and fo["block_size_m"] <= 0:
        bad("folds.block_size_m", "must be positive (or leave it out to use the variogram suggestion)")
    if fo["method"] == "buffered_leave_one_out" and not fo["buffer_m"]:
        bad("folds.buffer_m", "buffered_leave_one_out needs buffer_m, the exclusion radius in metres")
    targets = s["evaluation"]["zone_targets"]
    prev = 0.0
    for zone, share in targets.items():
        if not isinstance(share, _NUM) or not prev < share <= 1:
            bad(f"evaluation.zone_targets.{zone}", "site shares must increase from the top zone and lie in (0, 1]")
            break
        prev = share
    maps = s["maps"]["learners"]
    if isinstance(maps, str) and maps not in MAP_CHOICES:
        bad("maps.learners", f"{maps!r} is not one of {', '.join(MAP_CHOICES)} (or a list of learner names)")
    elif isinstance(maps, list):
        unused = [m for m in maps if m not in s["learners"]["use"]]
        if unused or not all(isinstance(m, str) for m in maps):
            bad("maps.learners", f"{unused or maps} not among the learners used ({', '.join(s['learners']['use'])})")
    for name in s["inputs"]:
        if name in s["distances"]:
            bad(f"inputs.{name}", "the same name is used in [distances]")


def load_experiment(path) -> Experiment:
    """Read, merge (``extends``) and validate an experiment file.

    Raises
    ------
    ConfigError
        With every problem found, one per line, each naming file, key and line.
    """
    path = Path(path).resolve()
    data, sources = _read_toml(path, ())
    return experiment_from_dict(data, path=path, text=path.read_text(encoding="utf-8"), sources=sources)


#: Command-line flag names of ``mlsites sample`` -> (section, key) of the experiment.
FLAG_KEYS = {
    "dem": ("study", "dem"), "seed": ("study", "seed"), "name": ("study", "name"),
    "sites": ("sites", "path"), "id_field": ("sites", "id_field"), "x_field": ("sites", "x_field"),
    "y_field": ("sites", "y_field"), "crs": ("sites", "crs"),
    "terrain_layers": ("terrain", "layers"), "tpi_radii_m": ("terrain", "tpi_radii_m"),
    "site_buffer_m": ("sampling", "site_buffer_m"), "background_count": ("sampling", "background_count"),
    "background_fraction": ("sampling", "background_fraction"), "exclusion_m": ("sampling", "exclusion_m"),
    "survey_areas": ("sampling", "survey_areas"), "survey_mode": ("sampling", "survey_mode"),
    "effort_field": ("sampling", "effort_field"),
    "fold_method": ("folds", "method"), "n_splits": ("folds", "n_splits"),
    "block_size_m": ("folds", "block_size_m"), "buffer_m": ("folds", "buffer_m"),
    "runs_dir": ("outputs", "runs_dir"),
}


def experiment_from_flags(experiment=None, *, inputs=None, **flags) -> Experiment:
    """An experiment from command-line flags, optionally over an experiment file.

    Parameters
    ----------
    experiment : path-like, optional
        Experiment file the flags override; without it the flags alone define the
        study (``dem`` and ``sites`` are then required).
    inputs : dict of str to (path, kind), optional
        Extra raster layers.
    **flags
        Values keyed as in :data:`FLAG_KEYS`; None means "not given". Relative
        paths are taken from the working directory, as a shell user expects.

    Returns
    -------
    Experiment
        Validated exactly like a file (all problems reported at once).
    """
    if experiment is not None:
        path = Path(experiment).resolve()
        data, sources = _read_toml(path, ())
        text = path.read_text(encoding="utf-8")
    else:
        path, data, sources, text = Path.cwd() / "command-line flags", {}, (), ""
    for flag, value in flags.items():
        if flag not in FLAG_KEYS:
            raise ConfigError(f"unknown option {flag!r}")
        if value is None:
            continue
        section, key = FLAG_KEYS[flag]
        is_path = SCHEMA[section][key][2]
        data.setdefault(section, {})[key] = str(Path(value).resolve()) if is_path else value
    for name, (p, kind) in (inputs or {}).items():
        data.setdefault("inputs", {})[name] = {"path": str(Path(p).resolve()), "kind": kind}
    return experiment_from_dict(data, path=path, text=text, sources=sources)
