"""Statistics over many grains: activity tables, relative CRSS by maximum likelihood, onsets in
in-situ series (``docs/statistics.md``).

- :mod:`~tracefit.stats.data` -- a survey folder read as grains, candidate systems, drives, families
- :mod:`~tracefit.stats.activity` -- activity tables and Schmid-factor ranks
- :mod:`~tracefit.stats.crss` -- relative CRSS by maximum likelihood, with 95 % intervals
- :mod:`~tracefit.stats.series` -- families tracked across the frames of an in-situ series; onsets
- :mod:`~tracefit.stats.simulate` -- populations with known truth; random-texture Schmid factors
- :mod:`~tracefit.stats.api` -- :func:`survey_statistics`, the one entry point

The package reads plain survey records and the library's geometry; pandas and scipy load only
when a table or a fit is made.
"""

from tracefit.stats import activity, api, crss, data, series, simulate
from tracefit.stats.activity import ActivityTables, activity_tables, family_credit
from tracefit.stats.api import TABLE_FILES, SurveyStatistics, survey_statistics
from tracefit.stats.crss import CHI2_95, CrssFit, fit_crss
from tracefit.stats.data import GrainCase, Observation, SurveyData, family_labels, grain_cases, read_survey, system_drives
from tracefit.stats.series import SeriesOnsets, track_series
from tracefit.stats.simulate import random_orientations, random_texture_schmid, sachs_factor, simulate_population

__all__ = list(dict.fromkeys(data.__all__ + activity.__all__ + crss.__all__ + series.__all__ + simulate.__all__
                             + api.__all__))
