"""Placement survey: how pluck and pickup positions shape the tone, from the engine's modes."""

from rtvoice.survey.grid import default_placement, placement_energies, survey, survey_grid
from rtvoice.survey.inputs import Placement, SurveyError
from rtvoice.survey.result import DESCRIPTOR_FIELDS, SurveyPlane, SurveyResult

__all__ = [
    "DESCRIPTOR_FIELDS",
    "Placement",
    "SurveyError",
    "SurveyPlane",
    "SurveyResult",
    "default_placement",
    "placement_energies",
    "survey",
    "survey_grid",
]
