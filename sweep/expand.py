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

At sweep scale (a million variants) nothing is held per variant as a Python
object: :func:`expand` returns :class:`Variants`, a lazy sequence over the
variants' factorial positions (variant -> one code per axis by mixed radix).
Its ids are hashed in bulk: the canonical JSON of every variant is a fixed
template with a few holes, one per top-level parameter that some axis changes;
the axes that change the same parameters form a *block*, and each distinct
combination of a block's values is validated once (a ``Study``) and gives the
text of its holes. A :class:`Variant` (with its validated ``Study``) is built
only when indexed. :func:`expand_eager` is the reference: one validated study
per variant, the same ids, labels and axis values (tests compare them).
"""

from __future__ import annotations

import copy
import difflib
import hashlib
import itertools
import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
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
from luxsweep.sweep.errors import StudyFileError
from luxsweep.sweep.registry import RENAMED_OPTIONS

__all__ = [
    "Variant",
    "Variants",
    "axis_names",
    "check_vary",
    "expand",
    "expand_eager",
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
    _check_nested(loaded, seen)
    for loc, paths, rows in _axes(study):
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


def _check_nested(loaded: StudyFile, seen: dict[str, tuple]) -> None:
    """Refuse a varied path inside another varied path (``room.windows.0`` and
    ``room.windows.0.offset``): which value would win is not defined."""
    for outer, outer_place in seen.items():
        for inner, place in seen.items():
            if inner.startswith(outer + "."):
                raise loaded.error(place, f"'{inner}' lies inside '{outer}' (at "
                                   f"'{dotted(outer_place)}'), which is also varied, so the "
                                   "two would overwrite each other; vary only one of them "
                                   f"(e.g. give the values of '{inner}' inside each value of "
                                   f"'{outer}')")


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


def _resolve(loaded: StudyFile, base: dict[str, Any], assignment: dict[str, Any]) -> Study:
    """The resolved study of one assignment of values (climate filled in)."""
    resolved = _substitute(base, assignment, loaded.folder)
    if resolved.climate is None:
        resolved = resolved.model_copy(update={"climate": resolved.default_climate})
    return resolved


def _axis_values(resolved: Study, assignment: dict[str, Any]) -> dict[str, Any]:
    """Store coordinate values: file paths as written in the study file (portable, no
    machine paths); other values in canonical form (90 -> 90.0)."""
    canon = resolved.canonical()
    return {p: str(v) if p in _FILE_KEYS
            else get_path(canon, named_parts(canon, split_path(p)))
            for p, v in assignment.items()}


def _label(axis_values: dict[str, Any]) -> str:
    return " ".join(f"{p}={_format(v)}" for p, v in axis_values.items()) or "base"


def _variant_id(params: dict[str, Any]) -> str:
    return hashlib.sha256(canonical_json(params).encode()).hexdigest()[:16]


def _identical(loaded: StudyFile, first: str, second: str) -> StudyFileError:
    return loaded.error(("vary",), f"variants '{first}' and '{second}' are identical; remove "
                        "the repeated value")


def expand_eager(loaded: StudyFile) -> list[Variant]:
    """All variants of a study, one validated ``Study`` each (the reference for
    :func:`expand`; fine for small studies, not for sweeps of many thousands).

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
        resolved = _resolve(loaded, base, assignment)
        axis_values = _axis_values(resolved, assignment)
        params = variant_params(resolved, hashes)
        variant_id = _variant_id(params)
        label = _label(axis_values)
        if variant_id in ids:
            raise _identical(loaded, ids[variant_id], label)
        ids[variant_id] = label
        variants.append(Variant(index=len(variants), variant_id=variant_id, label=label,
                                axes=axis_values, study=resolved, params=params))
    if not variants:
        raise loaded.error(("exclude",), "every variant is excluded; loosen 'exclude'")
    return variants


class _Expansion:
    """What all variants of a study share: axes, value tables, blocks and the id template.

    Variant ``i`` of the kept factorial positions ``kept`` has code
    ``(kept[i] // strides[a]) % lengths[a]`` on axis ``a`` (first axis slowest).
    A *block* is a set of axes that change the same top-level parameters; each
    distinct combination of a block's codes among the kept variants is resolved
    once (``block_studies``) and ``block_index[b][i]`` says which one variant
    ``i`` has.
    """

    def __init__(self, loaded: StudyFile) -> None:
        study = loaded.study
        self.loaded = loaded
        self.base = study.canonical()
        self.axes = _axes(study)
        self.paths = [p for _, paths, _ in self.axes for p in paths]
        self.lengths = np.asarray([len(rows) for _, _, rows in self.axes], dtype=np.int64)
        strides = np.ones(len(self.axes), dtype=np.int64)
        for a in range(len(self.axes) - 2, -1, -1):
            strides[a] = strides[a + 1] * self.lengths[a + 1]
        self.strides = strides
        self.hashes: dict[str, str] = {}
        self.kept = self._kept()
        if not len(self.kept):
            raise loaded.error(("exclude",), "every variant is excluded; loosen 'exclude'")
        # per axis value: its resolved study alone (the rest as in the file), its
        # store coordinates and its part of the label
        self.file_study = _resolve(loaded, self.base, {})
        file_params = variant_params(self.file_study, self.hashes)
        self.single: list[list[Study]] = []
        self.values: list[list[dict[str, Any]]] = []
        self.pieces: list[list[str]] = []
        changed: list[set[str]] = []
        for _, paths, rows in self.axes:
            studies, values, pieces, keys = [], [], [], set()
            for row in rows:
                assignment = dict(zip(paths, row, strict=True))
                resolved = self._resolve(assignment)
                params = variant_params(resolved, self.hashes)
                # compared as canonical text (90 and 90.0 are equal, not the same text)
                keys |= {k for k in params
                         if canonical_json(params[k]) != canonical_json(file_params[k])}
                studies.append(resolved)
                values.append(_axis_values(resolved, assignment))
                pieces.append(_label(values[-1]))
            self.single.append(studies)
            self.values.append(values)
            self.pieces.append(pieces)
            changed.append(keys)
        self.blocks = _blocks(changed)
        self.block_studies: list[list[Study]] = []
        self.block_index: list[np.ndarray] = []
        fills: dict[str, list[str]] = {}
        self.block_of: dict[str, int] = {}
        for b, (axes, keys) in enumerate(self.blocks):
            combo = np.zeros(len(self.kept), dtype=np.int64)
            for a in axes:
                combo = combo * self.lengths[a] + self.code(self.kept, a)
            present, inverse = np.unique(combo, return_inverse=True)
            studies = []
            for code in present.tolist():
                picks = {}
                for a in reversed(axes):
                    code, picks[a] = divmod(code, int(self.lengths[a]))
                assignment: dict[str, Any] = {}
                for a in axes:  # in study-file order
                    _, paths, rows = self.axes[a]
                    assignment.update(zip(paths, rows[picks[a]], strict=True))
                studies.append(self._resolve(assignment))
            params = [variant_params(s, self.hashes) for s in studies]
            for k in keys:
                fills[k] = [canonical_json(p[k]) for p in params]
                self.block_of[k] = b
            self.block_studies.append(studies)
            self.block_index.append(inverse.astype(np.int32).reshape(-1))
        self.ids = self._bulk_ids(file_params, fills)
        self._check_ids()

    # -- codes ------------------------------------------------------------------
    def code(self, positions: np.ndarray, a: int) -> np.ndarray:
        """Codes on axis ``a`` of factorial positions."""
        return (positions // self.strides[a]) % self.lengths[a]

    def assignment(self, position: int) -> dict[str, Any]:
        out: dict[str, Any] = {}
        for a, (_, paths, rows) in enumerate(self.axes):
            j = int(position // self.strides[a] % self.lengths[a])
            out.update(zip(paths, rows[j], strict=True))
        return out

    def _kept(self) -> np.ndarray:
        """Factorial positions that no exclusion drops."""
        n = int(np.prod(self.lengths)) if len(self.lengths) else 1
        positions = np.arange(n, dtype=np.int64)
        keep = np.ones(n, dtype=bool)
        column = {p: (a, c) for a, (_, paths, _) in enumerate(self.axes)
                  for c, p in enumerate(paths)}
        for entry in self.loaded.study.exclude:
            match = np.ones(n, dtype=bool)
            for path, value in entry.items():
                a, c = column[path]
                rows = self.axes[a][2]
                codes = [j for j, row in enumerate(rows) if _same(row[c], value)]
                match &= np.isin(self.code(positions, a), codes)
            keep &= ~match
        return positions[keep]

    def _resolve(self, assignment: dict[str, Any]) -> Study:
        try:
            return _resolve(self.loaded, self.base, assignment)
        except ValidationError as exc:
            loc, message = validation_problems(exc)[0]
            shown = " ".join(f"{p}={_format(v)}" for p, v in assignment.items())
            raise self.loaded.error(("vary",), f"the combination {shown} is not valid at "
                                    f"'{dotted(loc)}': {message}; change the values or "
                                    "leave the combination out with 'exclude'") from exc

    # -- ids ----------------------------------------------------------------------
    def _bulk_ids(self, file_params: dict[str, Any], fills: dict[str, list[str]]) -> np.ndarray:
        """Variant ids of every kept variant from the canonical JSON template.

        The params of every variant equal the file's except at the keys some block
        changes; ``canonical_json`` sorts keys and is compositional, so the text of
        a variant is the template with each hole replaced by its block's text.
        """
        holes = sorted(fills)
        template = dict(file_params)
        for k in holes:
            template[k] = f"\x00{k}\x00"
        text = canonical_json(template)
        pieces: list[str] = []
        for k in holes:
            head, text = text.split(canonical_json(f"\x00{k}\x00"), 1)
            pieces.append(head)
        pieces.append(text)
        n = len(self.kept)
        if not holes:
            return np.full(n, _variant_id(file_params), dtype="U16")
        columns = [np.asarray([s + pieces[h + 1] for s in fills[k]], dtype=object)
                   [self.block_index[self.block_of[k]]] for h, k in enumerate(holes)]
        start = hashlib.sha256(pieces[0].encode())
        out = np.empty(n, dtype="U16")
        for i, parts in enumerate(zip(*columns, strict=True)):
            h = start.copy()
            h.update("".join(parts).encode())
            out[i] = h.hexdigest()[:16]
        return out

    def _check_ids(self) -> None:
        """Refuse duplicates (as the eager path does); compare a few ids with the eager path."""
        _, first, inverse = np.unique(self.ids, return_index=True, return_inverse=True)
        inverse = inverse.reshape(-1)
        repeated = np.flatnonzero(first[inverse] != np.arange(len(self.ids)))
        if len(repeated):
            j = int(repeated[0])
            raise _identical(self.loaded, self.label(int(first[inverse[j]])), self.label(j))
        n = len(self.kept)
        for i in sorted({0, n - 1, *np.linspace(0, n - 1, 5).astype(int).tolist()}):
            self.variant(i, i)

    # -- per variant --------------------------------------------------------------
    def label(self, i: int) -> str:
        position = int(self.kept[i])
        parts = [self.pieces[a][int(position // self.strides[a] % self.lengths[a])]
                 for a in range(len(self.axes))]
        return " ".join(parts) or "base"

    def variant(self, i: int, index: int) -> Variant:
        """Variant ``i`` (kept order) as the eager path builds it, at store ``index``."""
        assignment = self.assignment(int(self.kept[i]))
        resolved = _resolve(self.loaded, self.base, assignment)
        axis_values = _axis_values(resolved, assignment)
        params = variant_params(resolved, self.hashes)
        variant_id = _variant_id(params)
        if variant_id != self.ids[i]:
            raise RuntimeError(
                f"{self.loaded.path}: variant '{_label(axis_values)}': its id computed in bulk "
                f"({self.ids[i]}) differs from its own ({variant_id}); parameters of this study "
                "interact in a way the bulk expansion does not model — a luxsweep bug, "
                "please report it with the study file")
        return Variant(index=index, variant_id=variant_id, label=_label(axis_values),
                       axes=axis_values, study=resolved, params=params)


def _blocks(changed: list[set[str]]) -> list[tuple[list[int], set[str]]]:
    """Group axes that change a common top-level parameter (union of overlapping sets)."""
    blocks: list[tuple[list[int], set[str]]] = []
    for a, keys in enumerate(changed):
        if not keys:
            continue
        axes, merged = [a], set(keys)
        for other in [b for b in blocks if b[1] & merged]:
            blocks.remove(other)
            axes, merged = sorted(axes + other[0]), merged | other[1]
        blocks.append((axes, merged))
    return blocks


class Variants(Sequence[Variant]):
    """The variants of a study as a lazy sequence (no Python object per variant).

    Indexing builds one :class:`Variant` (a validated ``Study``) on demand;
    the bulk accessors (:attr:`ids`, :meth:`labels`, :meth:`axis_values`,
    :meth:`codes`, :meth:`studies_for`) work on arrays. ``Variant.index`` is the
    position in this sequence (the store order once the plan has reordered it).
    """

    def __init__(self, expansion: _Expansion, select: np.ndarray | None = None) -> None:
        self._x = expansion
        self._select = (np.arange(len(expansion.kept), dtype=np.int64) if select is None
                        else np.asarray(select, dtype=np.int64))

    def __len__(self) -> int:
        return len(self._select)

    def __getitem__(self, i: Any) -> Any:
        if isinstance(i, slice):
            return Variants(self._x, self._select[i])
        n = len(self)
        j = int(i) + n if int(i) < 0 else int(i)
        if not 0 <= j < n:
            raise IndexError(f"variant {i} out of range ({n} variants)")
        return self._x.variant(int(self._select[j]), j)

    def __iter__(self) -> Iterator[Variant]:
        for j in range(len(self)):
            yield self[j]

    def reordered(self, order: np.ndarray) -> Variants:
        """The same variants in the order ``order`` (indices into this sequence)."""
        return Variants(self._x, self._select[np.asarray(order, dtype=np.int64)])

    @property
    def study(self) -> Study:
        """The study file's own resolved study (nothing varied)."""
        return self._x.file_study

    @property
    def ids(self) -> np.ndarray:
        """``variant_id`` of every variant (str array)."""
        return self._x.ids[self._select]

    @property
    def positions(self) -> np.ndarray:
        """Factorial position of every variant (before exclusions)."""
        return self._x.kept[self._select]

    @property
    def n_axes(self) -> int:
        return len(self._x.axes)

    def axis_length(self, a: int) -> int:
        """Number of values of axis ``a``."""
        return int(self._x.lengths[a])

    def file_hash(self, path: str) -> str:
        """sha256 of file ``path`` (read once per expansion)."""
        return _content_hash(path, self._x.hashes)

    def codes(self, a: int) -> np.ndarray:
        """Index into axis ``a``'s values of every variant."""
        return self._x.code(self.positions, a)

    def axis_values(self, path: str) -> list[Any]:
        """Store coordinate of axis ``path`` for every variant."""
        for a, (_, paths, _) in enumerate(self._x.axes):
            if path in paths:
                table = [v[path] for v in self._x.values[a]]
                return [table[c] for c in self.codes(a).tolist()]
        raise KeyError(f"'{path}' is not a varied axis")

    def labels(self) -> list[str]:
        """Readable label of every variant (as :attr:`Variant.label`)."""
        x = self._x
        if not x.axes:
            return ["base"] * len(self)
        columns = [np.asarray(x.pieces[a], dtype=object)[self.codes(a)]
                   for a in range(len(x.axes))]
        return [" ".join(parts) for parts in zip(*columns, strict=True)]

    def axis_studies(self, a: int) -> list[Study]:
        """Resolved study of each value of axis ``a`` (the other axes as in the file)."""
        return self._x.single[a]

    def studies_for(self, key: str) -> tuple[list[Study], np.ndarray]:
        """Studies that hold top-level parameter ``key`` of every variant.

        Returns ``(studies, index)``: variant ``i`` has the value of ``key`` of
        ``studies[index[i]]`` (a parameter no axis changes: the file's study).
        """
        b = self._x.block_of.get(key)
        if b is None:
            return [self._x.file_study], np.zeros(len(self), dtype=np.int32)
        return self._x.block_studies[b], self._x.block_index[b][self._select]


def expand(loaded: StudyFile) -> Variants:
    """All variants of a study in factorial order (first axis slowest), lazily.

    Same variants, ids, labels and axis values as :func:`expand_eager`, without
    a validated study per variant: one per value of each axis and one per
    distinct combination of each block (module doc).

    Raises
    ------
    StudyFileError
        When exclusions drop every variant, two variants are identical, or a
        combination of values is not valid.
    """
    return Variants(_Expansion(loaded))


def axis_names(study: Study) -> list[str]:
    """Varied paths in study-file order (the coordinates of the results store)."""
    return [p for _, paths, _ in _axes(study) for p in paths]


def study_hash(loaded: StudyFile, variants: Sequence[Variant]) -> str:
    """Hash of what fixes a results store's layout and contents.

    The variant ids (in store order), the axes, the metric families,
    ``store_series``, the ``sunlight`` settings when given and the version of the
    kernels that compute results (:data:`kernels.RESULTS_VERSION`, derived from
    their sources), so a store is never finished by code that computes
    differently from the code that began it; not the study name or the ``rank``
    section, so editing ranking criteria keeps a store usable.
    """
    from luxsweep.kernels import RESULTS_VERSION

    study = loaded.study
    ids = variants.ids if isinstance(variants, Variants) else [v.variant_id for v in variants]
    payload = {
        "variants": "\x00",
        "axes": axis_names(study),
        "metrics": list(study.metrics),
        "store_series": study.store_series,
        "results_version": RESULTS_VERSION,
    }
    if study.sunlight is not None:  # EN 17037 sunlight settings (not in the variant ids)
        payload["sunlight"] = study.sunlight.model_dump(mode="json")
    # the canonical JSON of the payload with the list of ids, hashed piece by piece
    # (ids are hex digits: their JSON is the quoted text)
    head, tail = canonical_json(payload).split(canonical_json("\x00"))
    digest = hashlib.sha256(head.encode())
    digest.update(b"[")
    step = 1 << 16
    for a in range(0, len(ids), step):
        part = ids[a:a + step]
        text = ",".join(f'"{v}"' for v in (part.tolist() if isinstance(part, np.ndarray)
                                           else part))
        digest.update((b"," if a else b"") + text.encode())
    digest.update(b"]" + tail.encode())
    return digest.hexdigest()
