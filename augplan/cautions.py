"""The cautions every report carries (README, "Cautions"); the README says the same."""

__all__ = ["CAUTIONS"]

CAUTIONS = (
    "Where a model's mistakes can hurt someone (medical images, safety inspection), read these first.",
    "augplan's verdicts are statistical evidence from a small proxy model, not proof: "
    "a transform called safe can still harm cases the proxy model cannot see.",
    "Transforms that change laterality (flips), colour cues (hue, saturation, brightness) or scale (zoom) "
    "can change a diagnosis or a defect class.",
    "A domain expert signs off on every recipe before it is used.",
    "Local regulations and licensed practice decide; augplan does not.",
)
