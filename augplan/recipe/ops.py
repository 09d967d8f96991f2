"""THE op table: every fact about an op except its pixel work, in one place.

For each op: its range field (the *magnitude* field), the values each end of
the range may take, the magnitude that leaves an image unchanged, whether
ranges are sampled in log space, whether it is geometric (uses the recipe's
``fill``), and the example range that error messages suggest. The recipe
reader (`augplan.recipe.parse`) validates against this table, the transform
engine (`augplan.augment.transforms.OPS`) takes its op attributes from it, and
the shipped JSON Schema (``recipe.schema.json``) is tested against it.
"""

from dataclasses import dataclass

__all__ = ["Bound", "OpRule", "OP_TABLE", "FILLS", "AXES"]

#: Fill modes of geometric ops (``fill:`` of a recipe); the first is the default.
FILLS = ("reflect", "constant", "edge")
#: Axes of ``flip``; the first is the default.
AXES = ("horizontal", "vertical")


def _number_text(value):
    return str(int(value)) if float(value).is_integer() else repr(float(value))


@dataclass(frozen=True)
class Bound:
    """Allowed values for each end of a magnitude range."""

    minimum: float | None = None
    maximum: float | None = None
    exclusive_minimum: bool = False

    def admits(self, value):
        """True when ``value`` may be an end of the range."""
        if self.minimum is not None:
            if self.exclusive_minimum and not value > self.minimum:
                return False
            if not self.exclusive_minimum and not value >= self.minimum:
                return False
        if self.maximum is not None and not value <= self.maximum:
            return False
        return True

    def describe(self):
        """The bound in words for error messages ('' when any number will do)."""
        if self.minimum is not None and self.maximum is not None:
            if self.exclusive_minimum:
                return f"> {_number_text(self.minimum)} and <= {_number_text(self.maximum)}"
            return f"between {_number_text(self.minimum)} and {_number_text(self.maximum)}"
        if self.minimum is not None:
            return f"{'>' if self.exclusive_minimum else '>='} {_number_text(self.minimum)}"
        return ""

    def json_schema(self):
        """The JSON Schema of one end of the range."""
        schema = {"type": "number"}
        if self.minimum is not None:
            schema["exclusiveMinimum" if self.exclusive_minimum else "minimum"] = _json_value(self.minimum)
        if self.maximum is not None:
            schema["maximum"] = _json_value(self.maximum)
        return schema


def _json_value(value):
    return int(value) if float(value).is_integer() else float(value)


@dataclass(frozen=True)
class OpRule:
    """The facts about one op.

    Attributes
    ----------
    name : str
        Op name as written in a recipe.
    magnitude : str or None
        The range field (``"degrees"``, ``"factor"``, ``"fraction"``,
        ``"sigma"``); None for flip, whose field is ``axis``.
    bound : Bound or None
        Allowed values of each end of the range; None for flip.
    identity : float or None
        Magnitude that leaves the image unchanged (0 or 1); None for flip.
    log_scale : bool
        Ranges are sampled uniformly in log space (multiplicative factors).
    geometric : bool
        Uses the recipe's ``fill``.
    example : str or None
        A typical range, as YAML, for error messages.
    """

    name: str
    magnitude: str | None
    bound: Bound | None
    identity: float | None
    log_scale: bool
    geometric: bool
    example: str | None

    @property
    def fields(self):
        """The op's own fields besides ``op`` and the common ones."""
        return ("axis",) if self.magnitude is None else (self.magnitude,)

    def range_schema(self):
        """The JSON Schema of the range field: one number or a ``[low, high]`` pair."""
        end = self.bound.json_schema()
        return {"anyOf": [end, {"type": "array", "prefixItems": [end, end], "minItems": 2, "maxItems": 2,
                                "items": False}]}


# Sane bounds: every value inside them is a meaningful augmentation that the
# engine computes without overflow; values outside are typing slips (1e308)
# or would wipe the image out. Common practice, no source: a full turn either
# way, half the hue wheel either way, a tenfold zoom or tone change, a blur of
# 20 pixels, noise as large as the whole 0..1 range.
_TURN = Bound(minimum=-360.0, maximum=360.0)
_HALF_WHEEL = Bound(minimum=-180.0, maximum=180.0)
_ZOOM = Bound(minimum=0.1, maximum=10.0)
_TONE = Bound(minimum=0.0, maximum=10.0, exclusive_minimum=True)
_SATURATION = Bound(minimum=0.0, maximum=10.0)
_UNIT = Bound(minimum=-1.0, maximum=1.0)
_BLUR = Bound(minimum=0.0, maximum=20.0)
_NOISE = Bound(minimum=0.0, maximum=1.0)

OP_TABLE = {
    rule.name: rule
    for rule in (
        OpRule("flip", None, None, None, log_scale=False, geometric=False, example=None),
        OpRule("rotate", "degrees", _TURN, 0.0, log_scale=False, geometric=True, example="[-15, 15]"),
        OpRule("zoom", "factor", _ZOOM, 1.0, log_scale=True, geometric=True, example="[0.9, 1.2]"),
        OpRule("shift", "fraction", _UNIT, 0.0, log_scale=False, geometric=True, example="[-0.1, 0.1]"),
        OpRule("brightness", "factor", _TONE, 1.0, log_scale=True, geometric=False, example="[0.6, 1.4]"),
        OpRule("contrast", "factor", _TONE, 1.0, log_scale=True, geometric=False, example="[0.8, 1.2]"),
        OpRule("saturation", "factor", _SATURATION, 1.0, log_scale=True, geometric=False, example="[0.7, 1.3]"),
        OpRule("hue", "degrees", _HALF_WHEEL, 0.0, log_scale=False, geometric=False, example="[-10, 10]"),
        OpRule("blur", "sigma", _BLUR, 0.0, log_scale=False, geometric=False, example="[0, 1.5]"),
        OpRule("noise", "sigma", _NOISE, 0.0, log_scale=False, geometric=False, example="[0, 0.03]"),
    )
}
