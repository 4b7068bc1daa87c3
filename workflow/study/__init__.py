"""The study file: safe loading, schema, sweeps, derived values, expansion into cases, case identity.

Use
---
>>> from bodysweep.workflow.study import load_study, expand, StudyError
>>> study = load_study("studies/demo_forearm_capsule.yaml")   # doctest: +SKIP
>>> cases = expand(study)                                     # doctest: +SKIP
>>> cases[0].case_id, cases[0].label                          # doctest: +SKIP
('43ffb07dc9ba', 'f=403MHz ext=wrist_loop depth=8mm ring=none')

Every problem is a :class:`StudyError` whose text is one line,
``"<key path>: <problem> (got <value>; allowed: <...>)"``; ``key_path`` is ``file`` for problems of the
file as a whole (size, encoding, YAML syntax) and ``(root)`` for a document that is not a mapping.

The file (edge units: mm, MHz, g)
---------------------------------
``workflow/schema/study.schema.json`` describes every key. In short::

    study: forearm_depths            # letters, digits, - and _ (becomes results/<study>/)
    description: free text
    frequencies_MHz: [403, 915]      # implicit outer sweep axis; 10 ... 6000 MHz
    scene: {...}                     # geometry/data/scene.schema.json
    solver: {preset: draft}          # workflow/schema/solver.schema.json
    sar:
      masses_g: [1, 10]
      limits: [{mass_g: 10, limit_W_per_kg: 2.0, source: "..."}]
      max_air_fraction: 0.1
    excite: [1]                      # or [1, 2]
    sweep:
      parameters:                    # short name -> what it changes
        depth: scene.implant.depth_mm                 # a scalar by dotted path (list items by index)
        fat: scene.phantom.layers.1.thickness_mm
        ext:                                          # a choice: named alternatives (whole sub-trees)
          path: scene.external
          options: {loop: {...}, dipole: {...}}
      blocks:                        # each case takes one row of every block (product of blocks)
        - grid: {ext: [loop, dipole], depth: [5, 10]}      # every combination, last name fastest
        - zip: {fat: [3, 4], skin: [1, 2]}                 # varied together
        - list: [{cpw: 12}, {cpw: 16}]                     # explicit rows
        - random: {seed: 1, count: 4, ranges: {r: [5, 9]}, decimals: 3}
        - latin_hypercube: {seed: 1, count: 4, ranges: {r: [5, 9]}}
    derived:                         # per case, in order; may use parameters, earlier derived, frequency_MHz
      muscle: {path: scene.phantom.layers.2.thickness_mm, expr: "max(2 * depth, 20) - fat"}
    budget: {max_cases: 10000, max_cpu_hours: null, max_disk_GB: null}

Expansion order: frequencies outermost, then the blocks (first block slowest). Choices are applied
first (shallow paths before deep ones), then scalars, then derived values; every case's scene is
then validated against the scene schema and passed through ``Scene.from_dict``, its solver section
through ``settings_from_dict``.

Identity
--------
Two identities, each the first 12 hex digits of the sha256 of a canonical JSON (sorted keys, no
whitespace, numbers as floats rounded to 15 significant digits and written by ``repr``):
``solve_id`` over what decides the fields (resolved scene in SI, frequency, solver settings but
``threads`` and ``n_band_points``, excited ports, ``BUILDER_VERSION``, ``ADAPTER_VERSION``; the SAR
masses too with ``solver.engine_sar_average``), and ``case_id`` (the finish identity) over the
``solve_id`` plus the post-processing settings (SAR masses, limits, ``max_air_fraction``,
``n_band_points``, ``POST_VERSION``). The study name and label are part of neither.
"""
from .cases import (Case, case_identities, case_label, count_cases, expand, identity_content, sar2si,
                    solve_content)
from .errors import StudyError
from .identity import canonical_json, code_versions, content2case_id
from .study import DEFAULT_MAX_CASES, Study, load_study

__all__ = ["load_study", "expand", "StudyError", "Study", "Case", "count_cases", "canonical_json",
           "content2case_id", "code_versions", "case_label", "identity_content", "sar2si", "DEFAULT_MAX_CASES",
           "case_identities", "solve_content"]
