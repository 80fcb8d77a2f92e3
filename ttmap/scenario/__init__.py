"""Scenario files: many sources, periods and comparisons described in one TOML file.

The package reads and checks scenario files; running them is
:func:`ttmap.jobs.scenario.run_scenario_file`.

- :mod:`~ttmap.scenario.locator` - the line of every key in TOML text;
- :mod:`~ttmap.scenario.schema` - tables, keys and units; the validated file;
- :mod:`~ttmap.scenario.trench` - rupture centres along a trench polyline;
- :mod:`~ttmap.scenario.validate` - the complete check, with the readers of the run;
- :mod:`~ttmap.scenario.tasks` - the solves a file asks for, and its summary.
"""

from __future__ import annotations

from ttmap.scenario.locator import KeyPath, format_key_path, locate_keys
from ttmap.scenario.schema import (
    RUPTURE_KEYS,
    SECTION_KEYS,
    BathymetrySettings,
    NestSettings,
    GridInfo,
    OutputSettings,
    ScenarioFile,
    ScenarioFileError,
    ScenarioIssue,
    ScenarioSpec,
    SpeedSettings,
    TrenchSpec,
)
from ttmap.scenario.tasks import scenario_nests, scenario_tasks, summary_lines
from ttmap.scenario.trench import trench_centres
from ttmap.scenario.validate import did_you_mean, load_scenario_file, validate

__all__ = [
    "RUPTURE_KEYS",
    "SECTION_KEYS",
    "BathymetrySettings",
    "NestSettings",
    "GridInfo",
    "KeyPath",
    "OutputSettings",
    "ScenarioFile",
    "ScenarioFileError",
    "ScenarioIssue",
    "ScenarioSpec",
    "SpeedSettings",
    "TrenchSpec",
    "did_you_mean",
    "format_key_path",
    "load_scenario_file",
    "locate_keys",
    "scenario_nests",
    "scenario_tasks",
    "summary_lines",
    "trench_centres",
    "validate",
]
