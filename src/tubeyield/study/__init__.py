"""Reading study files: TOML in user units -> frozen dataclasses in SI units."""

from tubeyield.study.load import load_study, study_from_dict, study_from_sources, study_from_text
from tubeyield.study.schema import Study

__all__ = ["Study", "load_study", "study_from_dict", "study_from_sources", "study_from_text"]
