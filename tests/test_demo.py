"""The README demo runs and writes its plot."""

from lgt.cli import main
from lgt.commands.demo import SCENARIO
from test_basis_properties import brute_force_physical


def test_demo_writes_plot(tmp_path, capsys):
    assert main(["demo", "--outdir", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    count = brute_force_physical(SCENARIO).shape[0]  # reference: brute-force Gauss's-law count
    assert f"physical subspace: {count} of {3 ** 9}" in out
    assert (tmp_path / "demo_gaps_vs_mass.png").stat().st_size > 1000
