"""The TOML project file: load and validate it, then run the whole pipeline from it.

- :mod:`envlink.project.schema`: every section and key, validated with line numbers;
- :mod:`envlink.project.load`: reading a project file into a :class:`Project`;
- :mod:`envlink.project.steps`: the steps of a run, each with located errors;
- :mod:`envlink.project.fit`: the model step;
- :mod:`envlink.project.run`: :func:`run_project` and :func:`run_demo`.
"""

from __future__ import annotations

from envlink.project.load import Project, load_project
from envlink.project.run import RunResult, run_demo, run_project

__all__ = ["Project", "RunResult", "load_project", "run_project", "run_demo"]
