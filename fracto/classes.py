"""Names of the fracture modes, shared by the generator, the classifier and the reports.

Label images use the position in :data:`CLASSES` as the pixel value; index 0
means "not labelled" (masks) and is never a mode.
"""

#: Fracture modes in fracto's outputs, in label order (label = index + 1).
MODES: tuple[str, ...] = ("intergranular", "transgranular", "ductile", "fatigue")

#: Label index -> name, as written to ``truth.json`` ``"classes"``.
CLASSES: tuple[str, ...] = ("unlabelled", *MODES)

#: Name of the regions the classifier declines to call.
UNCLASSIFIED: str = "unclassified"


def label_of(mode: str) -> int:
    """Label index of a mode name (``"intergranular"`` -> 1)."""
    return CLASSES.index(mode)
