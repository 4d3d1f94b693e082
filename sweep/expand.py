"""Expand a study's ``vary`` section into variants with stable ids.

Axes:

- every ``vary`` key is one axis (a dotted path into the study, or ``orientation``
  / ``climate``); the variants are the full factorial of the axes;
- every ``vary_together`` group is one axis whose paths move in step (zipped);
- ``exclude`` entries drop the variants that match all of their assignments.

Each :class:`Variant` carries its resolved :class:`~sweep.config.Study` (values
substituted, nothing left to vary), its axis values, a readable label and
``variant_id``: the first 16 hex digits of the sha256 of the canonical JSON of its
resolved parameters. File paths enter the hash as the sha256 of the file
contents, so moving a study folder keeps every id.
"""

from __future__ import annotations

import copy
import difflib
import hashlib
import itertools
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from pydantic import ValidationError

from luxsweep.sweep.config import (
    NOT_VARIABLE,
    Study,
    StudyFile,
    canonical_json,
    cross_check,
    dotted,
    validation_problems,
)
from luxsweep.sweep.registry import RENAMED_OPTIONS

__all__ = [
    "Variant",
    "axis_names",
    "check_vary",
    "expand",
    "file_sha256",
    "get_path",
    "has_path",
    "named_parts",
    "set_path",
    "split_path",
    "study_hash",
    "variant_params",
]

# Study keys holding file paths (resolved to absolute paths in the model).
_FILE_KEYS = ("mesh", "sensors")


@dataclass(frozen=True)
class Variant:
    """One point of the sweep.

    Attributes
    ----------
    index : int
        Position along the ``variant`` dimension of the results store.
    variant_id : str
        16 hex digits, stable hash of ``params``.
    label : str
        ``orientation=90 climate=coastal ...`` (axis order of the study file).
    axes : dict
        Vary key -> resolved value (file paths as written in the study file).
    study : Study
        The resolved study (values substituted, no ``vary``).
    params : dict
        The JSON-able parameters that were hashed.
    """

    index: int
    variant_id: str
    label: str
    axes: dict[str, Any]
    study: Study
    params: dict[str, Any]

    @property
    def climate(self) -> str:
        return self.study.default_climate

    @property
    def orientation(self) -> float:
        return self.study.orientation


# ---------------------------------------------------------------------------
# dotted paths


def split_path(path: str) -> tuple:
    """``'room.windows.0.width'`` -> ``('room', 'windows', 0, 'width')``."""
    return tuple(int(p) if p.isdigit() else p for p in path.split("."))


_NAMED_LISTS = ("spaces", "mesh_spaces")
"""Study lists whose items ``vary`` reaches by ``name`` (CONTRACT.md §1b)."""

_FIXED_SPACE_KEYS = ("name", "occupied", "copies")
"""Keys of a space that cannot be varied: they would rename spaces or change which
spaces exist or are measured, and the spaces of a study are the same in every
variant (one ``space`` coordinate in the store). ``copies.step`` may be varied."""


def named_parts(data: Any, parts: tuple) -> tuple:
    """A path with a space named by ``name`` turned into its list index.

    ``('spaces', 'classroom', 'windows', 0, 'width')`` ->
    ``('spaces', 1, 'windows', 0, 'width')`` when ``classroom`` is the second
    space of ``data`` (a canonical study dict). A name that is not found stays a
    string (so the path does not exist, even for a name made of digits).
    """
    if len(parts) < 2 or parts[0] not in _NAMED_LISTS or not isinstance(data, dict):
        return parts
    items = data.get(parts[0])
    if not isinstance(items, list):
        return parts
    names = [str(item.get("name")) if isinstance(item, dict) else None for item in items]
    name = str(parts[1])
    if name in names:
        return (parts[0], names.index(name), *parts[2:])
    return (parts[0], name, *parts[2:])


def _space_path_problem(base: dict[str, Any], parts: tuple) -> str | None:
    """Why a ``vary`` path into ``spaces``/``mesh_spaces`` is refused (None when it is fine)."""
    head = parts[0]
    items = base.get(head)
    if not isinstance(items, list):
        return None  # "does not exist" with the usual hint
    names = [str(item["name"]) for item in items]
    example = f"{head}.{names[0]}.width" if head == "spaces" else f"{head}.{names[0]}.grid"
    if len(parts) < 3:
        return (f"vary a key inside one space, named by its name (for example '{example}'); "
                f"a whole space or list of spaces cannot be varied")
    name = str(parts[1])
    if name not in names:
        copy_of = [n for n in names if name.startswith(n + "-") and name[len(n) + 1:].isdigit()]
        if copy_of:
            return (f"'{name}' is a copy of space '{copy_of[0]}', and the copies of a space "
                    f"change together: vary '{head}.{copy_of[0]}."
                    f"{'.'.join(map(str, parts[2:]))}'")
        return (f"there is no space named '{name}' under '{head}'; the spaces are "
                f"{', '.join(names)} (a vary path names a space by its name, not its "
                "position)")
    key = parts[2]
    if key in _FIXED_SPACE_KEYS and not (key == "copies" and parts[3:4] == ("step",)):
        return (f"'{key}' of a space cannot be varied: every variant must hold the same "
                "spaces under the same names (the results are compared space by space); "
                "make separate studies instead"
                + ("; 'copies.step' may be varied" if key == "copies" else ""))
    return None


def has_path(data: Any, parts: tuple) -> bool:
    for p in parts:
        if isinstance(data, dict) and isinstance(p, str) and p in data:
            data = data[p]
        elif isinstance(data, list) and isinstance(p, int) and 0 <= p < len(data):
            data = data[p]
        else:
            return False
    return True


def get_path(data: Any, parts: tuple) -> Any:
    for p in parts:
        data = data[p]
    return data


def set_path(data: dict[str, Any], parts: tuple, value: Any) -> dict[str, Any]:
    """A deep copy of ``data`` with the value at ``parts`` replaced."""
    out = copy.deepcopy(data)
    target: Any = out
    for p in parts[:-1]:
        target = target[p]
    target[parts[-1]] = value
    return out


# ---------------------------------------------------------------------------
# validation of the vary section


def _axes(study: Study) -> list[tuple[tuple, list[str], list[tuple]]]:
    """``(place in file, paths, rows of values)`` for each axis."""
    axes: list[tuple[tuple, list[str], list[tuple]]] = []
    for path, values in study.vary.items():
        axes.append((("vary", path), [path], [(v,) for v in values]))
    for i, group in enumerate(study.vary_together):
        paths = list(group)
        axes.append((("vary_together", i), paths, list(zip(*group.values(), strict=True))))
    return axes


def _place(loc: tuple, path: str, paths: list[str]) -> tuple:
    return (*loc, path) if len(paths) > 1 else loc


def _replaced(data: Any, parts: tuple, value: Any) -> Any:
    """``data`` with the value at ``parts`` replaced, copying only the containers on the
    path (the rest is shared with ``data``, which is not changed)."""
    if not parts:
        return value
    out = list(data) if isinstance(data, list) else dict(data)
    out[parts[0]] = _replaced(data[parts[0]], parts[1:], value)
    return out


def _substitute(base: dict[str, Any], assignment: dict[str, Any], folder: Path) -> Study:
    # path copying instead of a deep copy of the whole study per path (which was most
    # of the expansion's time); the validated Study never shares these dicts
    data = base
    for path, value in assignment.items():
        data = _replaced(data, named_parts(base, split_path(path)), value)
    data = {**data, "vary": {}, "vary_together": [], "exclude": []}
    return Study.model_validate(data, context={"base": str(folder)})


def check_vary(loaded: StudyFile) -> None:
    """Check ``vary``, ``vary_together`` and ``exclude``: paths exist, values are valid.

    Raises
    ------
    StudyFileError
        Naming the vary path (and the value) that is wrong, with its line.
    """
    study = loaded.study
    base = study.canonical()
    seen: dict[str, tuple] = {}
    for i, group in enumerate(study.vary_together):
        if not group:
            raise loaded.error(("vary_together", i), "an empty group; give {path: [values], ...}")
    for loc, paths, rows in _axes(study):
        for path in paths:
            place = _place(loc, path, paths)
            if not rows:
                raise loaded.error(place, f"'{path}' has an empty list of values; give at "
                                   "least one value or remove the entry")
            parts = split_path(path)
            if parts[0] in NOT_VARIABLE:
                raise loaded.error(place, f"'{parts[0]}' cannot be varied; vary a room, "
                                   "glazing, grid, occupancy or compute key, 'orientation' or "
                                   "'climate'")
            if parts[0] in _NAMED_LISTS:
                problem = _space_path_problem(base, parts)
                if problem:
                    raise loaded.error(place, problem)
                parts = named_parts(base, parts)
            if not has_path(base, parts):
                raise loaded.error(place, f"vary path '{path}' does not exist in this study; "
                                   f"{_path_hint(base, parts)}")
            if path in seen:
                raise loaded.error(place, f"'{path}' is varied twice (also at "
                                   f"'{dotted(seen[path])}'); keep one")
            seen[path] = place
        for j, row in enumerate(rows):
            assignment = dict(zip(paths, row, strict=True))
            try:
                resolved = _substitute(base, assignment, loaded.folder)
            except ValidationError as exc:
                inner_loc, message = validation_problems(exc)[0]
                raise loaded.error(
                    (*loc, j) if len(paths) == 1 else (*loc, paths[0], j),
                    f"value {row if len(row) > 1 else row[0]!r} (item {j}) is not valid at "
                    f"'{dotted(inner_loc)}': {message}",
                ) from exc
            problems = cross_check(resolved)
            if problems:
                shown = row if len(row) > 1 else row[0]
                raise loaded.error((*loc, j), f"value {shown!r} (item {j}): {problems[0][1]}")
    for path, text in study.labels.items():
        if path not in seen:
            close = difflib.get_close_matches(path, sorted(seen), n=1, cutoff=0.6)
            hint = f" — did you mean '{close[0]}'?" if close else ""
            raise loaded.error(("labels", path), f"'{path}' is not a varied axis ('labels' "
                               f"names keys under 'vary' or 'vary_together'){hint}")
        if not str(text).strip():
            raise loaded.error(("labels", path), "give a non-empty label")
    for i, entry in enumerate(study.exclude):
        for path, value in entry.items():
            if path not in seen:
                raise loaded.error(("exclude", i, path), f"'{path}' is not varied, so this "
                                   "exclusion can never match; use a path from 'vary' or "
                                   "'vary_together'")
            values = _values_of(study, path)
            if not any(_same(value, v) for v in values):
                raise loaded.error(("exclude", i, path), f"{value!r} is not one of the values "
                                   f"varied for '{path}' ({values}); this exclusion would never "
                                   "match")


def _path_hint(base: dict[str, Any], parts: tuple) -> str:
    known: Any = base
    for k, p in enumerate(parts):
        if isinstance(known, dict) and p in known:
            known = known[p]
            continue
        if isinstance(known, list) and isinstance(p, int) and p < len(known):
            known = known[p]
            continue
        prefix = ".".join(str(x) for x in parts[:k]) or "(top level)"
        if isinstance(known, dict):
            return f"under '{prefix}' the keys are: {', '.join(map(str, known))}"
        if isinstance(known, list):
            return f"'{prefix}' is a list of {len(known)} items (indices 0 to {len(known) - 1})"
        return f"'{prefix}' holds a value, not keys (it is {known!r} in this study)"
    return "check the spelling"


def _values_of(study: Study, path: str) -> list[Any]:
    if path in study.vary:
        return list(study.vary[path])
    for group in study.vary_together:
        if path in group:
            return list(group[path])
    return []


def _same(a: Any, b: Any) -> bool:
    if isinstance(a, int | float) and isinstance(b, int | float) and not isinstance(a, bool):
        return math.isclose(float(a), float(b), rel_tol=1e-12, abs_tol=1e-12)
    return a == b


# ---------------------------------------------------------------------------
# expansion


def file_sha256(path: str | Path) -> str:
    """sha256 hex of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _content_hash(path: str, hashes: dict[str, str]) -> str:
    """sha256 of file ``path``, read once per path and remembered in ``hashes``."""
    if path not in hashes:
        hashes[path] = file_sha256(path)
    return hashes[path]


def variant_params(study: Study, hashes: dict[str, str]) -> dict[str, Any]:
    """The hashed parameters of a resolved study: physics only, files as content hashes.

    ``hashes`` (path -> sha256) is filled as files are first met, so a varied
    ``mesh`` or ``sensors`` path is hashed like the base one.
    """
    data = study.canonical()
    # the keys that cannot be varied are also those that do not change a variant's results
    params = {k: v for k, v in data.items() if k not in NOT_VARIABLE}
    # hashed under their former spellings, so variant ids made before the rename stay
    former = {new: old for old, new in RENAMED_OPTIONS.items()}
    params["metric_options"] = {former.get(k, k): v for k, v in params["metric_options"].items()}
    label = study.default_climate
    params["climate"] = label
    params["climate_file"] = _content_hash(study.climates[label], hashes)
    for key in ("mesh", "sensors"):
        if params.get(key) is not None:
            params[key] = _content_hash(params[key], hashes)
    return params


def _format(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)


def expand(loaded: StudyFile) -> list[Variant]:
    """All variants of a study, in factorial order (first axis slowest).

    Raises
    ------
    StudyFileError
        When exclusions drop every variant, or two variants are identical.
    """
    study = loaded.study
    base = study.canonical()
    axes = _axes(study)
    hashes: dict[str, str] = {}  # filled by variant_params as files are met
    variants: list[Variant] = []
    ids: dict[str, str] = {}
    for combo in itertools.product(*[range(len(rows)) for _, _, rows in axes]):
        assignment: dict[str, Any] = {}
        for (_, paths, rows), j in zip(axes, combo, strict=True):
            assignment.update(zip(paths, rows[j], strict=True))
        if any(all(_same(assignment[p], v) for p, v in entry.items()) for entry in study.exclude):
            continue
        resolved = _substitute(base, assignment, loaded.folder)
        if resolved.climate is None:
            resolved = resolved.model_copy(update={"climate": resolved.default_climate})
        canon = resolved.canonical()
        # file paths as written in the study file (portable, no machine paths);
        # other values in canonical form (90 -> 90.0)
        axis_values = {p: str(v) if p in _FILE_KEYS
                       else get_path(canon, named_parts(canon, split_path(p)))
                       for p, v in assignment.items()}
        params = variant_params(resolved, hashes)
        variant_id = hashlib.sha256(canonical_json(params).encode()).hexdigest()[:16]
        label = " ".join(f"{p}={_format(v)}" for p, v in axis_values.items()) or "base"
        if variant_id in ids:
            raise loaded.error(("vary",), f"variants '{ids[variant_id]}' and '{label}' are "
                               "identical; remove the repeated value")
        ids[variant_id] = label
        variants.append(Variant(index=len(variants), variant_id=variant_id, label=label,
                                axes=axis_values, study=resolved, params=params))
    if not variants:
        raise loaded.error(("exclude",), "every variant is excluded; loosen 'exclude'")
    return variants


def axis_names(study: Study) -> list[str]:
    """Varied paths in study-file order (the coordinates of the results store)."""
    return [p for _, paths, _ in _axes(study) for p in paths]


def study_hash(loaded: StudyFile, variants: list[Variant]) -> str:
    """Hash of what fixes a results store's layout and contents.

    The variant ids (in store order), the axes, the metric families,
    ``store_series`` and the version of the kernels that compute results
    (:data:`kernels.RESULTS_VERSION`, derived from their sources), so a store is
    never finished by code that computes differently from the code that began
    it; not the study name or the ``rank`` section, so editing ranking criteria
    keeps a store usable.
    """
    from luxsweep.kernels import RESULTS_VERSION

    study = loaded.study
    payload = {
        "variants": [v.variant_id for v in variants],
        "axes": axis_names(study),
        "metrics": list(study.metrics),
        "store_series": study.store_series,
        "results_version": RESULTS_VERSION,
    }
    return hashlib.sha256(canonical_json(payload).encode()).hexdigest()
