"""Point keys are pinned: renaming an engine setting or moving code must not re-key
a single stored point.

The literal keys below were computed with pesflow before the engine protocol (the
settings then named ``conv_tol``, ``max_cycle``, ``grid_level``), PySCF version
string fixed to "2.14.0"; any change of them invalidates every cached point.
"""

import textwrap
from pathlib import Path

import numpy as np
import pytest

from pesflow.campaign import load_campaign
from pesflow.engine import EngineSettings
from pesflow.plan import keys
from pesflow.plan.expand import expand

H2 = np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 0.74]])


@pytest.mark.parametrize(
    "method, settings, key",
    [
        ("hf", EngineSettings(), "bcda72ac6a82b2e7e650a2aa689ccb3c"),
        ("b3lyp", EngineSettings(dft_grid_level=5), "71655237ffee0bb6d95aca7809b5da55"),
        (
            "mp2",
            EngineSettings(
                frozen_core=True,
                scf_energy_tolerance_hartree=1e-9,
                scf_max_iterations=50,
                scf_ladder=("default", "damped"),
                stability=True,
            ),
            "d69f1157e0f5cf36dda6f4a65b2dfe33",
        ),
        (
            "ccsd(t)",
            EngineSettings(reference="unrestricted", broken_symmetry=True),
            "55d835c20ac3a75b98a9e490f70bc2b5",
        ),
    ],
)
def test_point_key_is_the_one_computed_before_the_engine_protocol(method, settings, key):
    settings_key = settings.key_dict(method)
    got = keys.point_key(("H", "H"), H2, 0, 1, method, "sto-3g", settings_key, "pyscf", "2.14.0")
    assert got == key


SPEC = """\
campaign: pin
molecules:
  hf_molecule: {builtin: HF}
  peroxide: {builtin: H2O2}
scans:
  stretch:
    molecules: [hf_molecule]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.8, to: 1.2, points: 3}
  twist:
    molecules: [peroxide]
    relax: true
    coordinates:
      - {type: dihedral, atoms: [3, 1, 2, 4], values: [120.0]}
    engine: {scf_energy_tolerance_hartree: 1.0e-9, dft_grid_level: 4}
levels:
  - {method: [hf, mp2], basis: sto-3g}
  - {method: b3lyp, basis: sto-3g}
"""

#: (scan, walk, level) -> key, computed by ``expand`` before the engine protocol from
#: the same campaign (then written with conv_tol and grid_level).
PLAN_KEYS = {
    ("stretch", 0, "hf/sto-3g"): "ae3077951c9003160ac4c28846140ec6",
    ("stretch", 2, "hf/sto-3g"): "2526b9e6f30d3f34bee420903bca7bd4",
    ("stretch", 1, "mp2/sto-3g"): "db0fa66e7e1a1fad5135bf7c330eb156",
    ("stretch", 2, "b3lyp/sto-3g"): "601620fb8a544b696b851a7c705ca85c",
    ("twist", 0, "hf/sto-3g"): "f6bae88ec29daee1a427176868b89fdc",
    ("twist", 0, "mp2/sto-3g"): "eac2df76a0baaa6149b0de20250276a4",
    ("twist", 0, "b3lyp/sto-3g"): "c24de3c982fa261b58099c406882a7c0",
}


def test_plan_keys_are_the_ones_computed_before_the_engine_protocol():
    Path("pin.yaml").write_text(textwrap.dedent(SPEC))
    plan = expand(load_campaign("pin.yaml"), version="2.14.0")
    got = {
        (scan, int(walk), level): key
        for scan, walk, level, key in plan.points[["scan", "walk", "level", "key"]].itertuples(
            index=False
        )
    }
    for where, key in PLAN_KEYS.items():
        assert got[where] == key, where
