"""The method palette: one fixed colour and dash pattern per method, everywhere.

Ground layer (no imports from hedgerow): the interactive views (``widgets/_style.py``)
and the static report (``report.py``) both draw from here, so a method looks the same in
a notebook and in a saved report. Colours differ in hue *and* lightness so the pairs stay
apart under the common colour-vision deficiencies; lines add a dash pattern as a second
cue. Dash patterns are named (``solid``, ``dashed``, ``dash_dotted``, ``dotted``); each
renderer maps the name to its own syntax.
"""

from __future__ import annotations

__all__ = ["METHOD_COLOURS", "METHOD_DASHES", "ROW_COLOUR", "UNKNOWN_COLOUR", "base_method",
           "colour_of", "dash_of", "EFFECT_COLOURS", "ARM_COLOURS"]

METHOD_COLOURS = {
    "local linear forest": "#1d5fa8",  # cobalt
    "honest forest": "#e3891b",  # amber
    "Nadaraya-Watson": "#7f4fb0",  # violet
    "local linear (kernel)": "#2a9d7c",  # sea green
    "random forest (scikit-learn)": "#777777",  # mid grey
}
METHOD_DASHES = {
    "local linear forest": "solid",
    "honest forest": "solid",
    "Nadaraya-Watson": "dashed",
    "local linear (kernel)": "dash_dotted",
    "random forest (scikit-learn)": "dotted",
}
UNKNOWN_COLOUR = "#999999"
#: The training rows behind a curve (slate), in the views and the report alike.
ROW_COLOUR = "#5b6470"
#: The effect forest's two readings: the corrected one shares the local linear forest's
#: colour, the same trees without the correction (a local constant) the honest forest's.
EFFECT_COLOURS = {"corrected forest": METHOD_COLOURS["local linear forest"],
                  "uncorrected forest": METHOD_COLOURS["honest forest"]}
#: The arms of a treatment (overlap histograms in the effect views and the effect report).
ARM_COLOURS = {"untreated": "#e3891b", "treated": "#1d5fa8", "all rows": ROW_COLOUR}


def base_method(name: str) -> str:
    """Return the palette key of a method label ("honest forest (same trees)" → honest)."""
    return "honest forest" if name.startswith("honest forest") else name


def colour_of(name: str) -> str:
    """Return the fixed colour of a method (grey for one we do not know)."""
    return METHOD_COLOURS.get(base_method(name), UNKNOWN_COLOUR)


def dash_of(name: str) -> str:
    """Return the named dash pattern of a method (solid for one we do not know)."""
    return METHOD_DASHES.get(base_method(name), "solid")
