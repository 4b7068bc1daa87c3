"""The study file: safe loading, schema, sweeps, derived values, expansion into cases, case identity.

>>> from bodysweep.workflow.study import load_study, expand
>>> study = load_study("studies/demo.yaml")        # doctest: +SKIP
>>> [c.case_id for c in expand(study)]             # doctest: +SKIP
"""
from .cases import Case, case_label, count_cases, expand, sar2si
from .errors import StudyError
from .identity import canonical_json, code_versions, content2case_id
from .study import DEFAULT_MAX_CASES, Study, load_study

__all__ = ["load_study", "expand", "StudyError", "Study", "Case", "count_cases", "canonical_json",
           "content2case_id", "code_versions", "case_label", "sar2si", "DEFAULT_MAX_CASES"]
