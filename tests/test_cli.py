"""The command line: the example runs and prints what it measured; bad options exit 2."""

from __future__ import annotations

import pytest

from beadmd.cli import main


def test_example_runs_and_reports_chain_sizes(capsys):
    assert main(["example", "--lengths", "8,16", "--replicas", "4", "--steps", "400", "--threads", "1"]) == 0
    out = capsys.readouterr().out
    assert "<Rg^2>" in out and "effective exponent" in out
    rows = [line.split() for line in out.splitlines() if line.strip()[:2] in ("8 ", "16")]
    assert [r[0] for r in rows] == ["8", "16"]
    # Rg^2 of a short FENE+WCA chain is positive and grows with N (not a fixed output).
    assert 0 < float(rows[0][1]) < float(rows[1][1])


@pytest.mark.parametrize(
    ("argv", "words"),
    [
        (["example", "--steps", "100"], ["--steps", "100", "400"]),
        (["example", "--lengths", "8,x"], ["--lengths", "8,x"]),
        (["example", "--lengths", "1"], ["--lengths", ">= 2"]),
        (["example", "--replicas", "0"], ["--replicas", "0"]),
    ],
)
def test_bad_example_options_exit_2_with_a_message(argv, words, capsys):
    assert main(argv) == 2
    err = capsys.readouterr().err
    for w in words:
        assert w in err
