"""Placement survey: how pluck and pickup positions shape the tone, from the engine's modes."""

from rtvoice.survey.grid import default_placement, placement_energies, survey, survey_grid
from rtvoice.survey.inputs import Placement, SurveyError
from rtvoice.survey.neck import NeckComparison, NeckMap, compare_neck, survey_neck
from rtvoice.survey.placing import NotePlace, place_at
from rtvoice.survey.result import DESCRIPTOR_FIELDS, SurveyPlane, SurveyResult

__all__ = [
    "DESCRIPTOR_FIELDS",
    "NeckComparison",
    "NeckMap",
    "NotePlace",
    "Placement",
    "SurveyError",
    "SurveyPlane",
    "SurveyResult",
    "compare_neck",
    "default_placement",
    "place_at",
    "placement_energies",
    "survey",
    "survey_grid",
    "survey_neck",
]
