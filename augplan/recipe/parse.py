"""The recipe format: parse, validate, serialise and hash augmentation recipes.

A recipe is a small YAML file (README, "Recipe format")::

    name: tiles-draft
    seed: 7
    copies: 4
    fill: reflect
    transforms:
      - op: rotate
        degrees: [-15, 15]
        probability: 0.5

The ``seed`` field (default 0) is where the recipe's own draws start: the
default seed of the training team's loader (`augplan.torch.TensorAugmenter`)
and of ``augplan preview`` when no ``--seed`` is given. The analyses
(``check``, ``coverage``, ``evaluate``, ``vet``) take their generator from
``--seed`` instead, so vetting results do not depend on it; it is part of
`recipe_hash`, so two recipes that differ only in it are two recipes.

Validation is strict because a typo in a recipe would otherwise cost a long
training run: unknown keys, misspelled op names, booleans where numbers are
expected, NaN, inverted ranges, duplicate keys, tabs and YAML aliases are all
refused with a message that names the file, the line, the field, what is
allowed and what came. Transforms are numbered from 1 in messages, as a person
counts them in the file.

The op catalogue itself (the image functions) lives in `augplan.augment.transforms`;
this module keeps the table of which fields each op takes and which values
they allow, since checking a recipe is the recipe's job.

References
----------
.. [1] YAML Ain't Markup Language, version 1.1 (the dialect PyYAML reads),
       https://yaml.org/spec/1.1/
.. [2] JSON Schema draft 2020-12, https://json-schema.org/draft/2020-12
.. [3] FIPS 180-4, Secure Hash Standard (SHA-256), used by `recipe_hash`.
"""

import difflib
import hashlib
import json
import math
import numbers
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import yaml

from augplan.atomic import write_text_atomic
from augplan.errors import BadInputError
from augplan.files import UnreadableFileError, read_regular_file
from augplan.recipe.ops import AXES, FILLS, OP_TABLE

__all__ = [
    "FILLS",
    "MAX_COPIES",
    "MAX_NAME_BYTES",
    "MAX_RECIPE_BYTES",
    "MAX_SEED",
    "MAX_TRANSFORMS",
    "OP_FIELDS",
    "RECIPE_SCHEMA_PATH",
    "FrozenMap",
    "Recipe",
    "RecipeError",
    "Transform",
    "canonical_json",
    "check_recipe_classes",
    "dump_recipe",
    "parse_recipe",
    "parse_recipe_document",
    "read_recipe",
    "read_recipe_document",
    "recipe_hash",
    "magnitude_bounds",
    "recipe_to_dict",
    "vetted_checksum",
    "write_recipe",
]

RECIPE_SCHEMA_PATH = Path(__file__).with_name("recipe.schema.json")

#: A recipe is a page of text; anything larger is refused before parsing so a
#: stray data file passed as ``--recipe`` cannot stall the YAML parser.
MAX_RECIPE_BYTES = 1_000_000

TOP_LEVEL_FIELDS = ("name", "seed", "copies", "fill", "transforms")
COMMON_FIELDS = ("probability", "only", "except", "relabel")


class RecipeError(BadInputError):
    """A recipe file or text is unusable; the message names file, line and field."""


# The op table lives in augplan.recipe.ops; these views keep the reader's names.
#: op name -> (magnitude field or None, bound on each end of its range)
_OP_RULES = {op: (rule.magnitude, rule.bound) for op, rule in OP_TABLE.items()}

#: Largest ``copies``: a thousand augmented copies of every training image is
#: far past any use and keeps memory bounded (common practice, no source).
MAX_COPIES = 1000
#: Most transforms in one recipe: a chain this long is already far past any
#: use, and every transform costs the checker a sweep (common practice, no source).
MAX_TRANSFORMS = 100
#: Longest recipe name in UTF-8 bytes; names become parts of file names
#: (``vetted-<name>.yaml``), which most file systems cap at 255 bytes.
MAX_NAME_BYTES = 100
_FILE_SAFE_NAME = re.compile(r'[^./\\:*?"<>|\x00-\x1f\x7f][^/\\:*?"<>|\x00-\x1f\x7f]*')

#: Largest seed: seeds reach scikit-learn's ``random_state``, which takes
#: 0 .. 2**32 - 1 (and SQLite's 64-bit integers store them).
MAX_SEED = 2**32 - 1

def magnitude_bounds(op):
    """``(field, minimum, maximum, exclusive_minimum)`` of an op's magnitude range.

    ``field`` is None for an op without a magnitude (flip), and so are the
    bounds. The shipped JSON Schema states the same bounds.
    """
    field_name, bound = _OP_RULES[op]
    if field_name is None:
        return (None, None, None, False)
    return (field_name, bound.minimum, bound.maximum, bound.exclusive_minimum)


#: op name -> the op's own fields (besides ``op`` and the common fields).
OP_FIELDS = {op: rule.fields for op, rule in OP_TABLE.items()}


# --------------------------------------------------------------------------
# Data classes
# --------------------------------------------------------------------------

class FrozenMap(Mapping):
    """A read-only, hashable, picklable mapping (for transform params and relabel)."""

    __slots__ = ("_data",)

    def __init__(self, data=()):
        self._data = dict(data)

    def __getitem__(self, key):
        return self._data[key]

    def __iter__(self):
        return iter(self._data)

    def __len__(self):
        return len(self._data)

    def __hash__(self):
        return hash(frozenset(self._data.items()))

    def __eq__(self, other):
        if isinstance(other, Mapping):
            return dict(self._data) == dict(other.items())
        return NotImplemented

    def __repr__(self):
        return f"FrozenMap({self._data!r})"


def _as_range(value):
    """A number or a 2-sequence of numbers as a (low, high) float tuple; else unchanged."""
    if isinstance(value, numbers.Real) and not isinstance(value, bool):
        return (float(value), float(value))
    if (isinstance(value, (list, tuple)) and len(value) == 2
            and all(isinstance(v, numbers.Real) and not isinstance(v, bool) for v in value)):
        return (float(value[0]), float(value[1]))
    return value


@dataclass(frozen=True)
class Transform:
    """One step of a recipe.

    Parameters
    ----------
    op : str
        One of the ops in `OP_FIELDS` (the image functions are in
        ``augplan.augment.transforms.OPS``).
    params : Mapping
        The op's own fields. Magnitude ranges are ``(low, high)`` float tuples
        (a scalar ``v`` becomes ``(v, v)``); flip has ``{"axis": "horizontal"}``
        or ``{"axis": "vertical"}``. Stored read-only.
    probability : float
        Chance that the step is applied to a given draw, in [0, 1].
    only, exclude : tuple of str or None
        Class scope: apply only to these classes, or to every class except
        these (YAML key ``except``). At most one is set.
    relabel : Mapping or None
        ``{class: new_class}``: the label follows the image when the step runs.
    line : int or None
        Line of the step in its source file; not part of equality.
    field_lines : Mapping or None
        Line of each of the step's fields in its source file; not part of
        equality.
    """

    op: str
    params: Mapping = field(default_factory=FrozenMap)
    probability: float = 1.0
    only: tuple | None = None
    exclude: tuple | None = None
    relabel: Mapping | None = None
    line: int | None = field(default=None, compare=False)
    field_lines: Mapping | None = field(default=None, compare=False, repr=False)

    def __post_init__(self):
        # Normalise programmatic construction (dicts, lists, scalar ranges) to
        # the same frozen form the parser produces, so equality and hashing
        # do not depend on how a Transform was built.
        magnitude = _OP_RULES.get(self.op, (None, None))[0]
        params = {key: (_as_range(value) if key == magnitude else value)
                  for key, value in dict(self.params).items()}
        object.__setattr__(self, "params", FrozenMap(params))
        object.__setattr__(self, "probability", float(self.probability))
        for name in ("only", "exclude"):
            value = getattr(self, name)
            if value is not None:
                object.__setattr__(self, name, tuple(value))
        if self.relabel is not None:
            object.__setattr__(self, "relabel", FrozenMap(self.relabel))
        if self.field_lines is not None:
            object.__setattr__(self, "field_lines", FrozenMap(self.field_lines))

    def applies_to(self, label):
        """Whether the step's class scope includes ``label``.

        An unscoped step applies to every label, ``None`` included; a scoped
        step (``only`` or ``except``) never applies to an unknown label.
        """
        if self.only is None and self.exclude is None:
            return True
        if label is None:
            return False
        if self.only is not None:
            return label in self.only
        return label not in self.exclude


@dataclass(frozen=True)
class Recipe:
    """A parsed, validated augmentation recipe (README, "Recipe format").

    ``source`` (the file it came from) is not part of equality. ``seed``
    is the default seed of the recipe's own draws (the training loader of
    `augplan.torch`, ``augplan preview``); the analyses never read it.
    """

    name: str
    seed: int = 0
    copies: int = 4
    fill: str = "reflect"
    transforms: tuple = ()
    source: str | None = field(default=None, compare=False)

    def __post_init__(self):
        object.__setattr__(self, "transforms", tuple(self.transforms))


# --------------------------------------------------------------------------
# YAML loading with line numbers, duplicate keys and aliases refused
# --------------------------------------------------------------------------

class _RuleBroken(yaml.MarkedYAMLError):
    """Valid YAML that a recipe still refuses (duplicate keys, aliases)."""


class _RecipeLoader(yaml.SafeLoader):
    """SafeLoader that refuses duplicate keys and aliases, and reads 1e-3 as a number."""

    def compose_node(self, parent, index):
        # Refusing aliases outright rules out "billion laughs" expansion; a
        # recipe is short enough to write every value out.
        if self.check_event(yaml.AliasEvent):
            event = self.peek_event()
            raise _RuleBroken(
                None, None,
                f"found the alias '*{event.anchor}'; recipes may not use YAML "
                "anchors and aliases, write each value out",
                event.start_mark)
        return super().compose_node(parent, index)

    def construct_mapping(self, node, deep=False):
        if isinstance(node, yaml.MappingNode):
            self.flatten_mapping(node)
            seen = {}
            for key_node, _ in node.value:
                key = self.construct_object(key_node, deep=True)
                try:
                    first = seen.get(key)
                except TypeError:  # unhashable key: the base class reports it
                    continue
                if first is not None:
                    raise _RuleBroken(
                        None, None,
                        f"the key {key!r} appears twice (first on line {first})",
                        key_node.start_mark)
                seen[key] = key_node.start_mark.line + 1
        return super().construct_mapping(node, deep=deep)


# YAML 1.1 reads "1e-3" (no dot) as text; people write it as a number.
_RecipeLoader.add_implicit_resolver(
    "tag:yaml.org,2002:float",
    re.compile(r"^[-+]?(?:[0-9][0-9_]*)(?:\.[0-9_]*)?[eE][-+]?[0-9]+$"),
    list("-+0123456789"))


def _load_yaml(text, source):
    """Return (data, root node) or raise RecipeError with the YAML fault's line."""
    loader = None
    try:
        loader = _RecipeLoader(text)
        node = loader.get_single_node()
        data = loader.construct_document(node) if node is not None else None
    except _RuleBroken as error:
        raise RecipeError(f"{source} line {error.problem_mark.line + 1}: {error.problem}.") from None
    except yaml.MarkedYAMLError as error:
        mark = error.problem_mark or error.context_mark
        problem = error.problem or error.context or "unreadable YAML"
        if "'\\t'" in problem:
            problem = "a tab character; YAML indentation must use spaces"
            raise RecipeError(f"{source} line {mark.line + 1}: found {problem}.") from None
        if "another document" in problem:
            problem = "a recipe file holds one YAML document, found a second ('---')"
        where = f" line {mark.line + 1}" if mark is not None else ""
        raise RecipeError(f"{source}{where}: not valid YAML: {problem}.") from None
    except yaml.reader.ReaderError as error:
        line = text[:error.position].count("\n") + 1
        raise RecipeError(
            f"{source} line {line}: the character {chr(error.character)!r} "
            f"(code {error.character:#x}) is not allowed in a YAML file.") from None
    except yaml.YAMLError as error:
        raise RecipeError(f"{source}: not valid YAML: {error}.") from None
    except RecursionError:
        raise RecipeError(f"{source}: the YAML is nested too deeply to be a recipe.") from None
    finally:
        if loader is not None:
            loader.dispose()
    return data, node


def _key_lines(node):
    """Map each key of a YAML mapping node to its 1-based line."""
    lines = {}
    if isinstance(node, yaml.MappingNode):
        for key_node, _ in node.value:
            if isinstance(key_node, yaml.ScalarNode):
                lines[key_node.value] = key_node.start_mark.line + 1
    return lines


def _value_node(node, key):
    if isinstance(node, yaml.MappingNode):
        for key_node, value_node in node.value:
            if isinstance(key_node, yaml.ScalarNode) and key_node.value == key:
                return value_node
    return None


# --------------------------------------------------------------------------
# Validation
# --------------------------------------------------------------------------

def _describe(value):
    """Short text for a value that came, for 'got ...' in messages."""
    if isinstance(value, bool):
        return f"{str(value).lower()} (a yes/no value; quote it if you meant text)"
    if value is None:
        return "an empty value"
    if isinstance(value, float) and not math.isfinite(value):
        return f"{value} (not a finite number)"
    if isinstance(value, (int, float)):
        return repr(value)
    text = repr(value)
    if len(text) > 60:
        text = text[:57] + "..."
    if isinstance(value, list):
        return f"the list {text}"
    if isinstance(value, dict):
        return f"the mapping {text}"
    return text


def recipe_name_fault(name):
    """What is wrong with ``name`` as a recipe name, or None when it is fine.

    Names become parts of file names (``vetted-<name>.yaml``), so a name
    that is no file name is refused when the recipe is read, not when the
    last file of a long run is written.
    """
    if not isinstance(name, str) or not name.strip():
        return "must be a non-empty text"
    if len(name.encode("utf-8", "surrogatepass")) > MAX_NAME_BYTES or not _FILE_SAFE_NAME.fullmatch(name):
        return (f"must serve as a file name: at most {MAX_NAME_BYTES} bytes in UTF-8, none of "
                "/ \\ : * ? \" < > | or control characters, not starting with '.'")
    return None


def _is_number(value):
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _suggest(word, choices):
    close = difflib.get_close_matches(str(word), choices, n=1, cutoff=0.6)
    return f"did you mean '{close[0]}'? " if close else ""


class _Checker:
    """Validates the loaded YAML data against the format, with line numbers."""

    def __init__(self, source, root_node, extra_fields=()):
        self.source = source
        self.root = root_node
        self.extra_fields = tuple(extra_fields)
        self.top_lines = _key_lines(root_node)
        self.first_line = root_node.start_mark.line + 1 if root_node is not None else 1

    def fail(self, line, text):
        raise RecipeError(f"{self.source} line {line}: {text}")

    # -- top level --------------------------------------------------------
    def recipe(self, data):
        if data is None:
            raise RecipeError(f"{self.source}: the recipe is empty; it needs at least "
                              "'name' (and usually 'transforms').")
        if not isinstance(data, dict):
            self.fail(self.first_line, "a recipe must be a mapping of fields "
                      f"({', '.join(TOP_LEVEL_FIELDS)}); got {_describe(data)}.")
        for key in data:
            if key not in TOP_LEVEL_FIELDS and key not in self.extra_fields:
                self.fail(self.top_lines.get(str(key), self.first_line),
                          f"unknown field {str(key)!r} at the top level; "
                          f"{_suggest(key, TOP_LEVEL_FIELDS)}"
                          f"Allowed: {', '.join(TOP_LEVEL_FIELDS)}.")
        if "name" not in data:
            self.fail(self.first_line, "the recipe has no 'name' field; add one, "
                      "for example 'name: my-recipe' (it is used in reports).")
        name = data["name"]
        fault = recipe_name_fault(name)
        if fault is not None:
            self.top_field_fail("name", fault, name)
        seed = self.integer("seed", data.get("seed", 0), minimum=0, maximum=MAX_SEED)
        copies = self.integer("copies", data.get("copies", 4), minimum=1, maximum=MAX_COPIES)
        fill = data.get("fill", "reflect")
        if fill not in FILLS:
            self.top_field_fail("fill", f"must be one of {', '.join(FILLS)}", fill)
        raw_transforms = data.get("transforms", [])
        if not isinstance(raw_transforms, list):
            self.top_field_fail("transforms", "must be a list of transforms "
                                "(write [] for none)", raw_transforms)
        if len(raw_transforms) > MAX_TRANSFORMS:
            self.fail(self.top_lines.get("transforms", self.first_line),
                      f"the 'transforms' field holds at most {MAX_TRANSFORMS} transforms; got "
                      f"{len(raw_transforms)}. Split the recipe into several.")
        seq_node = _value_node(self.root, "transforms")
        item_nodes = seq_node.value if isinstance(seq_node, yaml.SequenceNode) else []
        transforms = []
        for index, item in enumerate(raw_transforms):
            item_node = item_nodes[index] if index < len(item_nodes) else None
            transforms.append(self.transform(index + 1, item, item_node))
        return Recipe(name=name, seed=seed, copies=copies, fill=fill,
                      transforms=tuple(transforms), source=self.source)

    def top_field_fail(self, key, allowed, value):
        self.fail(self.top_lines.get(key, self.first_line),
                  f"the '{key}' field {allowed}; got {_describe(value)}.")

    def integer(self, key, value, minimum, maximum):
        # Integral floats (7.0) pass, as in JSON Schema's "integer" type.
        if not _is_number(value) or not math.isfinite(value) or value != int(value) \
                or not minimum <= value <= maximum:
            self.top_field_fail(key, f"must be a whole number >= {minimum} and <= {maximum}", value)
        return int(value)

    # -- one transform ----------------------------------------------------
    def transform(self, number, item, node):
        line = node.start_mark.line + 1 if node is not None else self.first_line
        lines = _key_lines(node)
        if not isinstance(item, dict):
            self.fail(line, f"transform {number} must be a mapping with an 'op' field "
                      f"(for example '- op: rotate'); got {_describe(item)}.")
        if "op" not in item:
            self.fail(line, f"transform {number} has no 'op' field; "
                      f"allowed ops: {', '.join(_OP_RULES)}.")
        op = item["op"]
        if not isinstance(op, str) or op not in _OP_RULES:
            shown = repr(op) if isinstance(op, str) else _describe(op)
            self.fail(lines.get("op", line),
                      f"unknown op {shown} in transform {number}; "
                      f"{_suggest(op, list(_OP_RULES))}Allowed: {', '.join(_OP_RULES)}.")
        magnitude, bound = _OP_RULES[op]
        allowed = ("op",) + OP_FIELDS[op] + COMMON_FIELDS
        label = f"transform {number} ({op})"
        for key in item:
            if key not in allowed:
                self.fail(lines.get(str(key), line),
                          f"unknown field {str(key)!r} in {label}; "
                          f"{_suggest(key, allowed[1:])}Allowed: {', '.join(allowed[1:])}.")

        def field_fail(key, text, value):
            self.fail(lines.get(key, line),
                      f"the '{key}' field of {label} {text}; got {_describe(value)}.")

        if magnitude is None:
            axis = item.get("axis", "horizontal")
            if axis not in AXES:
                field_fail("axis", f"must be one of {', '.join(AXES)}", axis)
            params = {"axis": axis}
        else:
            if magnitude not in item:
                self.fail(line, f"{label} has no '{magnitude}' field; give a number "
                          f"or a [low, high] pair, for example '{magnitude}: "
                          f"{_EXAMPLES[op]}'.")
            params = {magnitude: self.magnitude(item[magnitude], bound, magnitude, field_fail)}

        probability = item.get("probability", 1.0)
        if not _is_number(probability) or not 0.0 <= probability <= 1.0:
            field_fail("probability", "must be a number between 0 and 1", probability)

        if "only" in item and "except" in item:
            self.fail(lines.get("except", line),
                      f"{label} has both 'only' and 'except'; use one of them.")
        only = self.classes(item["only"], "only", field_fail) if "only" in item else None
        exclude = self.classes(item["except"], "except", field_fail) if "except" in item else None
        relabel = self.relabel(item["relabel"], field_fail) if "relabel" in item else None
        return Transform(op=op, params=params, probability=float(probability), only=only,
                         exclude=exclude, relabel=relabel, line=line, field_lines=lines)

    @staticmethod
    def magnitude(value, bound, key, field_fail):
        extra = bound.describe()
        wanted = ("must be a number or a [low, high] pair"
                  + (f" of numbers {extra}" if extra else ""))
        if _is_number(value):
            pair = (value, value)
        elif isinstance(value, list) and len(value) == 2 and all(map(_is_number, value)):
            pair = tuple(value)
        else:
            field_fail(key, wanted, value)
        if not all(math.isfinite(v) for v in pair) or not all(map(bound.admits, pair)):
            field_fail(key, wanted, value)
        if pair[0] > pair[1]:
            field_fail(key, "must be a [low, high] pair with low <= high", value)
        return (float(pair[0]), float(pair[1]))

    @staticmethod
    def _class_name(value):
        # Folder names such as "0" come back from YAML as integers.
        if isinstance(value, int) and not isinstance(value, bool):
            return str(value)
        if isinstance(value, str) and value.strip():
            return value
        return None

    def classes(self, value, key, field_fail):
        wanted = "must be a non-empty list of class names, for example [cat, dog]"
        if not isinstance(value, list) or not value:
            field_fail(key, wanted, value)
        names = [self._class_name(v) for v in value]
        if any(name is None for name in names):
            field_fail(key, wanted, value)
        return tuple(names)

    def relabel(self, value, field_fail):
        wanted = "must be a mapping of class names, for example {left: right, right: left}"
        if not isinstance(value, dict) or not value:
            field_fail("relabel", wanted, value)
        pairs = [(self._class_name(k), self._class_name(v)) for k, v in value.items()]
        if any(k is None or v is None for k, v in pairs):
            field_fail("relabel", wanted, value)
        for source, target in pairs:
            if source == target:
                field_fail("relabel", f"must move each class to another; '{source}' maps to itself "
                           "(leave it out)", value)
        targets = [target for _, target in pairs]
        for target in targets:
            sources = [source for source, other in pairs if other == target]
            if len(sources) > 1:
                # Two classes into one would merge them: the label can no longer follow the image.
                field_fail("relabel", f"must be one-to-one; {' and '.join(map(repr, sources))} "
                           f"both map to {target!r}", value)
        return dict(pairs)


_EXAMPLES = {op: rule.example for op, rule in OP_TABLE.items() if rule.example is not None}


# --------------------------------------------------------------------------
# Public functions
# --------------------------------------------------------------------------

def parse_recipe(text, source="<string>"):
    """Parse and validate recipe text.

    Parameters
    ----------
    text : str or bytes
        The YAML document (bytes must be UTF-8).
    source : str
        Name used in error messages and stored as ``Recipe.source``.

    Returns
    -------
    Recipe

    Raises
    ------
    RecipeError
        For any fault, with the file, line, field, what is allowed and what came.
    """
    return parse_recipe_document(text, source)[0]


def parse_recipe_document(text, source="<string>", *, extra_fields=()):
    """Parse recipe text that may carry extra top-level fields.

    A vetted recipe adds ``evidence`` and ``checksum`` beside the recipe
    body; they are validated only for being present once.

    Returns
    -------
    recipe : Recipe
    extras : dict
        The values of the ``extra_fields`` found in the document.
    """
    if isinstance(text, (bytes, bytearray)):
        text = _decode(bytes(text), source)
    if not isinstance(text, str):
        raise RecipeError(f"{source}: recipe text must be a string; got {type(text).__name__}.")
    size = len(text.encode("utf-8", errors="surrogatepass"))
    if size > MAX_RECIPE_BYTES:
        raise RecipeError(f"{source}: {size} bytes is too large for a recipe "
                          f"(at most {MAX_RECIPE_BYTES} bytes).")
    data, node = _load_yaml(text, source)
    recipe = _Checker(source, node, extra_fields).recipe(data)
    extras = {key: data[key] for key in extra_fields if isinstance(data, dict) and key in data}
    return recipe, extras


def _decode(raw, source):
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as error:
        line = raw[:error.start].count(b"\n") + 1
        raise RecipeError(f"{source} line {line}: the file is not UTF-8 text "
                          f"(byte {raw[error.start]:#04x} at offset {error.start}); "
                          "save it as UTF-8.") from None


def read_recipe_document(path, *, extra_fields=()):
    """Read and validate a recipe file; see `parse_recipe_document`.

    Files larger than `MAX_RECIPE_BYTES` are refused before they are read.
    """
    path = Path(path)
    source = str(path)
    try:
        raw = read_regular_file(path, limit=MAX_RECIPE_BYTES, what="recipe")
    except UnreadableFileError as error:
        raise RecipeError(f"{source}: {error.reason}.") from None
    return parse_recipe_document(_decode(raw, source), source=source, extra_fields=extra_fields)


def read_recipe(path):
    """Read and validate a recipe file; see `parse_recipe`.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    Recipe
        With ``source`` set to ``str(path)``.

    Raises
    ------
    RecipeError
        Also for a missing file, a folder, non-UTF-8 bytes, and a file larger
        than `MAX_RECIPE_BYTES` (refused before it is read).
    """
    return read_recipe_document(path)[0]


def check_recipe_classes(recipe, classes):
    """Refuse class names in ``only``/``except``/``relabel`` that the data lacks.

    Parameters
    ----------
    recipe : Recipe
    classes : sequence of str
        The data set's training classes.

    Raises
    ------
    RecipeError
        Naming the recipe file, the transform's line, the unknown class and
        the closest class name of the data.
    """
    classes = tuple(classes)
    source = recipe.source or f"recipe '{recipe.name}'"
    for number, step in enumerate(recipe.transforms, start=1):
        named = [("only", name) for name in step.only or ()]
        named += [("except", name) for name in step.exclude or ()]
        for source_class, target_class in (step.relabel or {}).items():
            named += [("relabel", source_class), ("relabel", target_class)]
        for key, name in named:
            if name in classes:
                continue
            line = (step.field_lines or {}).get(key, step.line)
            where = f"{source} line {line}" if line is not None else source
            closest = difflib.get_close_matches(str(name), classes, n=1, cutoff=0.0)
            hint = f"the closest class is '{closest[0]}'; " if closest else ""
            raise RecipeError(
                f"{where}: the '{key}' field of transform {number} ({step.op}) names the class "
                f"{name!r}, which the data lacks; {hint}the data's classes: {', '.join(classes)}.")


def _range_out(pair):
    low, high = pair
    return low if low == high else [low, high]


def recipe_to_dict(recipe):
    """The recipe as plain YAML/JSON-able data, in the file format's layout.

    Parameters
    ----------
    recipe : Recipe

    Returns
    -------
    dict
        ``name, seed, copies, fill, transforms`` in that order. A fixed range
        ``(v, v)`` is written as the scalar ``v``; ``probability`` is always
        written; ``only``/``except``/``relabel`` only when set.
    """
    steps = []
    for step in recipe.transforms:
        magnitude = _OP_RULES.get(step.op, (None, None))[0]
        entry = {"op": step.op}
        for key, value in step.params.items():
            entry[key] = _range_out(value) if key == magnitude else value
        entry["probability"] = float(step.probability)
        if step.only is not None:
            entry["only"] = list(step.only)
        if step.exclude is not None:
            entry["except"] = list(step.exclude)
        if step.relabel is not None:
            entry["relabel"] = dict(step.relabel)
        steps.append(entry)
    return {"name": recipe.name, "seed": int(recipe.seed), "copies": int(recipe.copies),
            "fill": recipe.fill, "transforms": steps}


class _FlowList(list):
    """A list written on one line ([low, high], class lists)."""


class _FlowDict(dict):
    """A mapping written on one line (relabel)."""


class _RecipeDumper(yaml.SafeDumper):
    """Block style for the recipe and its steps, one-line style for their values."""


_RecipeDumper.add_representer(
    _FlowList, lambda dumper, data: dumper.represent_sequence(
        "tag:yaml.org,2002:seq", data, flow_style=True))
_RecipeDumper.add_representer(
    _FlowDict, lambda dumper, data: dumper.represent_mapping(
        "tag:yaml.org,2002:map", data, flow_style=True))


def dump_recipe(recipe):
    """The recipe as YAML text that `parse_recipe` reads back to an equal Recipe."""
    data = recipe_to_dict(recipe)
    for step in data["transforms"]:
        for key, value in step.items():
            if isinstance(value, list):
                step[key] = _FlowList(value)
            elif isinstance(value, dict):
                step[key] = _FlowDict(value)
    return yaml.dump(data, Dumper=_RecipeDumper, sort_keys=False, default_flow_style=False,
                     allow_unicode=True, width=100)


def write_recipe(recipe, path):
    """Write the recipe as YAML to ``path`` atomically (see `augplan.atomic`).

    Returns
    -------
    Path
        The destination path.
    """
    return write_text_atomic(path, dump_recipe(recipe))


def recipe_hash(recipe):
    """sha256 hex digest of the canonical JSON of `recipe_to_dict`.

    Canonical: keys sorted, no whitespace, ASCII only. The hash ignores where
    the recipe came from and how it was spelled (scalar or range, defaults
    written or left out).
    """
    return hashlib.sha256(canonical_json(recipe_to_dict(recipe)).encode("ascii")).hexdigest()


def canonical_json(document):
    """The canonical JSON text of a plain document: keys sorted, no whitespace, ASCII only."""
    return json.dumps(document, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False)


def vetted_checksum(recipe, evidence):
    """sha256 hex of the canonical JSON of ``{"recipe": body, "evidence": evidence}``.

    The checksum a vetted recipe file carries: it changes when any value of
    the recipe body or of its evidence block is edited.
    """
    document = {"recipe": recipe_to_dict(recipe), "evidence": evidence}
    return hashlib.sha256(canonical_json(document).encode("ascii")).hexdigest()
