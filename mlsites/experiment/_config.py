"""Experiment files: TOML, validated in full before any work starts.

An experiment file has sections of our own naming (``[study]``, ``[inputs]``,
``[distances]``, ``[terrain]``, ``[sites]``, ``[sampling]``, ``[folds]``,
``[learners]``, ``[evaluation]``, ``[explain]``, ``[outputs]``, ``[periods]``, ``[maps]``, ``[report]``). Paths are relative to the file
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
        "drop_unsurveyed_sites": (bool, False, False),
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
    # defaults as mlsites.explain.EXPLAIN_DEFAULTS (checked equal in the tests)
    "explain": {
        "n_explain": (int, 100, False),
        "n_background": (int, 50, False),
        "n_permutations": (int, 10, False),
        "n_repeats": (int, 5, False),
        "n_grid": (int, 20, False),
        "n_ice": (int, 30, False),
        "survey_layers": (list, [], False),
        "correlation_threshold": (_NUM, 0.8, False),
        "contribution_max_cells": (int, 5000, False),
    },
    "outputs": {
        "runs_dir": (str, "runs", True),
        "models_dir": (str, "models", True),
    },
    # Sites with uncertain dates; checked by mlsites.periods._settings.check_periods.
    "periods": {
        "block_width_years": (_NUM, 100.0, False),
        "span": (list, None, False),
        "origin_year": (_NUM, 0.0, False),
        "end_inclusive": (bool, False, False),
        "density": (str, "uniform", False),
        "ramp_share": (_NUM, 0.25, False),
        "n_simulations": (int, 1000, False),
        "bandwidth_m": (_NUM, None, False),
        "site_squares_m": (_NUM, 1000.0, False),
        "category_field": (str, None, False),
        "categories": (dict, {}, False),
        "windows": (dict, {}, False),
        "min_probability": (_NUM, 0.1, False),
    },
    "maps": {
        "learners": ((str, list), "best_and_baseline", False),
    },
    # Later-found sites the run checks its maps on (mlsites.mapping.check_in_run).
    "check": {
        "sites": (str, None, True),
        "layer": (str, None, False),
        "id_field": (str, "site_id", False),
        "x_field": (str, None, False),
        "y_field": (str, None, False),
        "crs": (str, None, False),
        "learners": (list, None, False),
    },
    # The run report (mlsites.report): a surface to compare the best map with, and how sites are shown.
    "report": {
        "reference_surface": (str, None, True),
        "reference_label": (str, "reference surface", False),
        "site_cell_m": (_NUM, 1000.0, False),
        "title": (str, None, False),
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
#: Fold methods by the one name each has in experiment files, command-line options,
#: the splitters' ``describe()`` and fold files.
FOLD_METHODS = ("square_blocks", "hexagon_blocks", "buffered_leave_one_out", "environmental", "random")
SURVEY_MODES = ("inside", "weighted")
#: Name of the zone below the last zone target (mlsites.evaluation's remainder).
REMAINDER_ZONE = "low"
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
    #: ``(file, text)`` of every file merged, the one read last (the top file) first.
    texts: tuple = ()
    #: Dotted keys set by command-line flags rather than by a file.
    overrides: frozenset = frozenset()

    def __getitem__(self, section):
        return self.settings[section]

    def where(self, key: str) -> str:
        """``file:line`` of the setting ``key`` (dotted, ``"inputs.soil.band"``).

        The file is the one whose value counts (a variant before its ``extends``
        base); the line is that of the key in its own table (an inline table's line
        for keys inside it). A key set by no file gives the top file alone, one set
        by a flag "command-line flags".
        """
        return _locate(self.texts, key, self.path, self.overrides)


_HEADER_RE = re.compile(r"^\s*\[\[?\s*([^\]]+?)\s*\]\]?\s*(?:#.*)?$")
_KEY_RE = re.compile(r"^\s*((?:\"[^\"]*\"|'[^']*'|[A-Za-z0-9_-]+)(?:\s*\.\s*(?:\"[^\"]*\"|'[^']*'|[A-Za-z0-9_-]+))*)\s*=")


def _key_parts(dotted: str) -> tuple:
    return tuple(p.strip().strip("\"'") for p in re.findall(r"\"[^\"]*\"|'[^']*'|[^.]+", dotted))


def _line_in(text: str, key: tuple) -> int | None:
    """Line of ``key`` (a tuple of table and key names) in one TOML text.

    Tables are followed from their ``[header]`` lines, so a key that appears in
    several tables (``path``) is found in the right one. A key inside an inline
    table (``soil = { path = ..., band = 2 }``) gives the inline table's line; a
    table given only by its header gives the header's line.
    """
    table: tuple = ()
    best = None
    for number, line in enumerate(text.splitlines(), start=1):
        m = _HEADER_RE.match(line)
        if m:
            table = _key_parts(m.group(1))
            if table == key:
                return number
            continue
        m = _KEY_RE.match(line)
        if not m:
            continue
        full = table + _key_parts(m.group(1))
        if full == key:
            return number
        if key[: len(full)] == full and best is None:
            best = number  # an inline table (or array) holding the key
    return best


def _locate(texts, key: str, default_path, overrides=frozenset()) -> str:
    if key in overrides:
        return "command-line flags"
    parts = _key_parts(key)
    for path, text in texts:
        line = _line_in(text, parts)
        if line is not None:
            return f"{path}:{line}"
    for path, text in texts:  # a key not written anywhere: the table that lacks it
        for n in range(len(parts) - 1, 0, -1):
            line = _line_in(text, parts[:n])
            if line is not None:
                return f"{path}:{line}"
    return str(default_path)


def _read_toml(path: Path, chain: tuple, named_by: str | None = None) -> tuple[dict, tuple, tuple]:
    """Data of an experiment file merged over its bases, the files (base first) and their texts (top first)."""
    if not path.exists():
        if named_by:
            raise ConfigError(f"{named_by}: extends = \"{path.name}\": file {path} not found; give the base file's "
                              "name relative to the file that extends it")
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
        return data, chain + (path,), ((path, text),)
    where = f"{path}:{_line_in(text, ('extends',))}"
    if not isinstance(base, str):
        raise ConfigError(f"{where}: 'extends' must be a file name (string), got {base!r}")
    base_data, sources, texts = _read_toml((path.parent / base).resolve(), chain + (path,), named_by=where)
    return _merge(base_data, data), _order(sources, path), ((path, text),) + texts


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


def experiment_from_dict(data: dict, *, path: Path, text: str = "", sources=(), texts=(),
                         overrides=frozenset()) -> Experiment:
    """Validate a merged experiment dict (paths already absolute) into an :class:`Experiment`.

    ``texts`` are ``(file, text)`` pairs of the files merged, top file first (from
    :func:`load_experiment`), for the line of each problem; ``text`` alone stands
    for the one file ``path``. ``overrides`` are dotted keys set by flags.
    """
    problems: list[str] = []
    texts = tuple(texts) or (((path, text),) if text else ())

    def bad(key, msg):
        problems.append(f"{_locate(texts, key, path, overrides)}: [{key}] {msg}")

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
    if len(problems) == 1:
        raise ConfigError(problems[0])
    if problems:
        raise ConfigError(f"{len(problems)} problems in the experiment:\n" + "\n".join(problems))
    name = settings["study"]["name"] or path.stem
    return Experiment(name=name, path=path, settings=settings, sources=tuple(sources) or (path,), texts=texts,
                      overrides=frozenset(overrides))


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
        if clean["band"] < 1:
            bad(f"inputs.{name}.band", f"band {clean['band']}; bands are numbered from 1")
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
    if sa["survey_mode"] == "none":
        # Lets a variant switch off the survey areas its base file names: the
        # background then comes from the whole study area, as without survey_areas.
        sa["survey_areas"], sa["survey_mode"] = None, "inside"
    if sa["survey_areas"] and not Path(sa["survey_areas"]).exists():
        bad("sampling.survey_areas", f"file not found: {sa['survey_areas']}")
    if sa["survey_mode"] not in SURVEY_MODES:
        bad("sampling.survey_mode", f"{sa['survey_mode']!r} is not one of {', '.join(SURVEY_MODES)}, none")
    if sa["survey_mode"] == "weighted" and not sa["effort_field"]:
        bad("sampling.effort_field", "survey_mode = \"weighted\" needs effort_field, the column of survey effort")
    if sa["drop_unsurveyed_sites"] and not (sa["survey_areas"] and sa["survey_mode"] == "inside"):
        bad("sampling.drop_unsurveyed_sites", "applies only with survey_areas and survey_mode = \"inside\"; "
            "give both or remove the key")
    for key in ("site_buffer_m", "exclusion_m"):
        if sa[key] < 0:
            bad(f"sampling.{key}", f"{sa[key]:g} m; distances must be zero or positive (metres)")
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
        if zone == REMAINDER_ZONE:
            bad(f"evaluation.zone_targets.{zone}", f"{zone!r} is the zone below the last target (the rest of "
                "the area); name the zones with targets otherwise, e.g. { high = 0.7, medium = 0.9 }")
            break
        if isinstance(share, bool) or not isinstance(share, _NUM) or not prev < share <= 1:
            bad(f"evaluation.zone_targets.{zone}", f"{zone} = {share!r}: site shares must increase from the "
                "top zone and lie in (0, 1], e.g. { high = 0.7, medium = 0.9 }")
            break
        prev = share
    shares = s["evaluation"]["top_area_shares"]
    numbers = [v for v in shares if isinstance(v, _NUM) and not isinstance(v, bool)]
    if not shares or len(numbers) < len(shares) or not all(0 < v <= 1 for v in numbers):
        bad("evaluation.top_area_shares", f"{shares!r}: give area shares in (0, 1], e.g. [0.1, 0.2, 0.33] "
            "(shares, not percentages)")
    elif len({round(100.0 * v, 6) for v in numbers}) < len(numbers):
        bad("evaluation.top_area_shares", f"{shares!r} repeats a share; list each share once")
    _check_terrain(s["terrain"], s["distances"], bad)
    ex = s["explain"]
    for key in ("n_explain", "n_background", "n_permutations", "n_repeats", "n_grid", "n_ice",
                "contribution_max_cells"):
        if ex[key] < 1:
            bad(f"explain.{key}", f"must be at least 1, got {ex[key]}")
    n_land = s["sampling"]["background_count"]
    for key in ("n_explain", "n_background"):
        if n_land is not None and 1 <= n_land < ex[key]:
            bad(f"explain.{key}", f"{ex[key]} landscape cells asked for, but [sampling] background_count = "
                f"{n_land} draws only {n_land} from the study area; set {key} to at most {n_land} or draw more "
                "background cells")
    if not 0 < ex["correlation_threshold"] < 1:
        bad("explain.correlation_threshold", f"must lie in (0, 1), got {ex['correlation_threshold']}")
    if not all(isinstance(v, str) for v in ex["survey_layers"]):
        bad("explain.survey_layers", "expected a list of layer names, e.g. [\"distance_roads\"]")
    else:
        _check_survey_layers(s, ex["survey_layers"], bad)
    maps = s["maps"]["learners"]
    if isinstance(maps, str) and maps not in MAP_CHOICES:
        bad("maps.learners", f"{maps!r} is not one of {', '.join(MAP_CHOICES)} (or a list of learner names)")
    elif isinstance(maps, list):
        unused = [m for m in maps if m not in s["learners"]["use"]]
        if unused or not all(isinstance(m, str) for m in maps):
            bad("maps.learners", f"{unused or maps} not among the learners used ({', '.join(s['learners']['use'])})")
    _check_check(s["check"], s["learners"]["use"], bad)
    rep = s["report"]
    if rep["reference_surface"] and not Path(rep["reference_surface"]).is_file():
        bad("report.reference_surface", f"file not found: {rep['reference_surface']}")
    if not rep["site_cell_m"] > 0:
        bad("report.site_cell_m", f"{rep['site_cell_m']:g} m; the squares sites are shown in need a positive side "
            "in metres, e.g. 1000")
    for name in s["inputs"]:
        if name in s["distances"]:
            bad(f"inputs.{name}", "the same name is used in [distances]")
    from mlsites.periods._settings import check_periods

    check_periods(s["periods"], bad)


def _check_check(c, used, bad):
    if not c["sites"]:
        given = [k for k in c if k != "sites" and c[k] != SCHEMA["check"][k][1]]
        if given:
            bad("check.sites", f"missing; [check] sets {', '.join(given)} but names no file of later-found sites")
        return
    if not Path(c["sites"]).exists():
        bad("check.sites", f"file not found: {c['sites']}")
    learners = c["learners"]
    if learners is not None:
        unused = [m for m in learners if m not in used]
        if not learners or unused or not all(isinstance(m, str) for m in learners):
            bad("check.learners", f"{unused or learners} not among the learners used ({', '.join(used)}); "
                "leave it out to check the learners the run maps")


def _feature_names(s):
    """The feature names an experiment's samples will have, or None when its terrain settings are bad."""
    from mlsites.errors import InputError
    from mlsites.experiment._samples import _is_feature
    from mlsites.terrain._pipeline import TerrainSettings, layer_names

    t = s["terrain"]
    try:
        names = layer_names(TerrainSettings(layers=tuple(t["layers"]), tpi_radii_m=tuple(t["tpi_radii_m"]),
                                            vectors=dict(s["distances"])))
    except (InputError, TypeError, ValueError):
        return None
    return [n for n in names if _is_feature(n, names)] + [n for n in s["inputs"] if n not in names]


def _check_survey_layers(s, survey_layers, bad):
    features = _feature_names(s)
    if features is None:
        return
    unknown = [v for v in survey_layers if v not in features]
    if unknown:
        bad("explain.survey_layers", f"{', '.join(map(repr, unknown))} {'is' if len(unknown) == 1 else 'are'} not "
            f"a feature of this experiment; its features are {', '.join(features)} (name a layer of [inputs], "
            "[distances] as distance_<name>, or [terrain] layers)")


def _check_terrain(t, distances, bad):
    radii = t["tpi_radii_m"]
    if not all(isinstance(r, _NUM) and not isinstance(r, bool) and r > 0 for r in radii):
        bad("terrain.tpi_radii_m", f"{radii!r}: radii are positive distances in metres, e.g. [100, 500]")
        return
    from mlsites.errors import InputError
    from mlsites.terrain._pipeline import TerrainSettings, layer_names

    if not all(isinstance(n, str) for n in t["layers"]):
        bad("terrain.layers", f"{t['layers']!r}: expected a list of layer names")
        return
    try:
        layer_names(TerrainSettings(layers=tuple(t["layers"]), tpi_radii_m=tuple(radii), vectors=dict(distances)))
    except InputError as exc:
        bad("terrain.layers", str(exc))


def load_experiment(path) -> Experiment:
    """Read, merge (``extends``) and validate an experiment file.

    Raises
    ------
    ConfigError
        With every problem found, one per line, each naming file, key and line.
    """
    path = Path(path).resolve()
    data, sources, texts = _read_toml(path, ())
    return experiment_from_dict(data, path=path, sources=sources, texts=texts)


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
        data, sources, texts = _read_toml(path, ())
    else:
        path, data, sources, texts = Path.cwd() / "command-line flags", {}, (), ()
    overrides = set()
    for flag, value in flags.items():
        if flag not in FLAG_KEYS:
            raise ConfigError(f"unknown option {flag!r}")
        if value is None:
            continue
        section, key = FLAG_KEYS[flag]
        is_path = SCHEMA[section][key][2]
        data.setdefault(section, {})[key] = str(Path(value).resolve()) if is_path else value
        overrides.add(f"{section}.{key}")
    for name, (p, kind) in (inputs or {}).items():
        data.setdefault("inputs", {})[name] = {"path": str(Path(p).resolve()), "kind": kind}
        overrides |= {f"inputs.{name}", f"inputs.{name}.path", f"inputs.{name}.kind"}
    return experiment_from_dict(data, path=path, sources=sources, texts=texts, overrides=overrides)
