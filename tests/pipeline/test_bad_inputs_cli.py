"""The bad-input corpus (tests/study/bad_inputs/) through the command line: `check`, `plan` and `run` each
refuse every file with exit 2 and one error line naming the key path of expected.yaml, and write nothing.

tests/study/test_bad_inputs.py checks the study layer's StudyError; this checks what a user sees.
Reference: common practice for command-line tools (non-zero exit, message on stderr, no partial output)."""
from pathlib import Path

import pytest
import yaml

from bodysweep.workflow import cli

CORPUS = Path(__file__).parents[1] / "study" / "bad_inputs"
EXPECTED: dict[str, str] = yaml.safe_load((CORPUS / "expected.yaml").read_text(encoding="utf-8"))


@pytest.mark.parametrize("command", ["check", "plan", "run", "explore"])
def test_every_corpus_file_exits_2_with_one_line(tmp_path, monkeypatch, capsys, command):
    monkeypatch.chdir(tmp_path)
    wrong = []
    for name, key in sorted(EXPECTED.items()):
        rc = cli.main([command, str(CORPUS / name)])
        err = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip()]
        ok = (rc == 2 and len(err) == 1 and err[0].startswith("bodysweep: error: ") and key in err[0])
        if not ok:
            wrong.append((name, rc, err[:3]))
    assert not wrong, wrong
    assert list(tmp_path.iterdir()) == []  # nothing written for any of them, not even results/
    assert len(EXPECTED) == len([p for p in CORPUS.glob("*.yaml") if p.name != "expected.yaml"])
