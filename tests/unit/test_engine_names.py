"""Method names, scf families, basis checks and settings keys of the engine interface.

No SCF runs here.  The valid functional names are the ones PySCF's libxc parser
accepts; the basis checks are against PySCF's own basis library.
"""

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import pesflow
from pesflow.engine import (
    WAVEFUNCTION_METHODS,
    EngineSettings,
    Geometry,
    canonical_method,
    check_basis,
    get_engine,
    scf_family,
)
from pesflow.errors import EngineSetupError


@pytest.mark.parametrize(
    "given, canonical",
    [
        ("hf", "hf"),
        ("HF", "hf"),
        ("  MP2 ", "mp2"),
        ("CCSD", "ccsd"),
        ("CCSD(T)", "ccsd(t)"),
        ("ccsd (t)", "ccsd(t)"),
        ("B3LYP", "b3lyp"),
        ("pbe", "pbe"),
        ("PBE0", "pbe0"),
        ("wB97X", "wb97x"),
        ("M06-2X", "m06-2x"),
    ],
)
def test_canonical_method(given, canonical):
    assert canonical_method(given) == canonical


@pytest.mark.parametrize(
    "method, family",
    [
        ("hf", "hf"),
        ("mp2", "hf"),
        ("CCSD", "hf"),
        ("ccsd(t)", "hf"),
        ("B3LYP", "b3lyp"),
        ("pbe0", "pbe0"),
    ],
)
def test_scf_family(method, family):
    assert scf_family(method) == family


def test_wavefunction_methods_are_their_own_canonical_names():
    assert all(canonical_method(m) == m for m in WAVEFUNCTION_METHODS)


@pytest.mark.parametrize("name", ["mp3", "b3lyp**", "", ",", "dft", "mrci"])
def test_unknown_method_is_a_one_line_setup_error(name):
    with pytest.raises(EngineSetupError) as info:
        canonical_method(name)
    message = str(info.value)
    assert "\n" not in message
    assert repr(name) in message
    assert "hf, mp2, ccsd, ccsd(t)" in message
    assert "or a DFT functional known to PySCF's libxc (e.g. b3lyp, pbe0)" in message


@pytest.mark.parametrize("name", ["rhf", "UHF", "rohf", "ump2", "uks"])
def test_reference_glued_to_a_method_is_refused_with_a_hint(name):
    # The reference is a setting (EngineSettings.reference), never part of the name.
    with pytest.raises(EngineSetupError, match="the reference .* is a setting"):
        canonical_method(name)


def test_dispersion_suffix_needs_its_package():
    # PySCF parses "b3lyp-d3bj" as B3LYP plus a D3(BJ) correction, which needs the
    # pyscf-dispersion package at run time; without it the name is refused up front.
    import importlib.util

    if importlib.util.find_spec("pyscf.dispersion") is not None:
        assert canonical_method("B3LYP-D3BJ") == "b3lyp-d3bj"
    else:
        with pytest.raises(EngineSetupError, match="pyscf-dispersion"):
            canonical_method("b3lyp-d3bj")


def test_basis_check_accepts_what_the_library_has():
    # PySCF's library: STO-3G is tabulated through Kr at least, cc-pVDZ covers H-Ar.
    check_basis("sto-3g", ["Kr", "O", "H"])
    check_basis("cc-pvdz", ["O", "H", "H", "Cl"])
    check_basis("def2-svp", ["Rn"])


@pytest.mark.parametrize(
    "basis, elements, missing",
    [
        ("6-31g", ["O", "H", "Kr", "Rn"], "Kr"),  # Pople 6-31G stops before Kr in PySCF
        ("cc-pvdz", ["H", "Rn"], "Rn"),
    ],
)
def test_basis_check_names_the_first_missing_element(basis, elements, missing):
    with pytest.raises(EngineSetupError) as info:
        check_basis(basis, elements)
    message = str(info.value)
    assert repr(basis) in message
    assert message.endswith(f"element {missing}")


def test_unknown_basis_name_is_a_setup_error():
    with pytest.raises(EngineSetupError, match="unknown basis 'no-such-basis'"):
        check_basis("no-such-basis", ["H"])


def test_key_dict_is_stable_json_and_leaves_out_resources():
    a = EngineSettings()
    b = EngineSettings(threads=2, max_memory_mb=16000)
    assert a.key_dict() == b.key_dict()
    assert json.dumps(a.key_dict()) == json.dumps(b.key_dict())
    assert list(a.key_dict()) == [
        "conv_tol",
        "max_cycle",
        "reference",
        "frozen_core",
        "grid_level",
        "scf_ladder",
        "broken_symmetry",
        "stability",
    ]
    assert "threads" not in a.key_dict() and "max_memory_mb" not in a.key_dict()


@pytest.mark.parametrize(
    "change",
    [
        {"scf_energy_tolerance_hartree": 1e-8},
        {"scf_max_iterations": 50},
        {"reference": "unrestricted"},
        {"frozen_core": True},
        {"dft_grid_level": 4},
        {"scf_ladder": ("default", "second-order")},
        {"broken_symmetry": True},
        {"stability": True},
    ],
)
def test_every_result_changing_setting_changes_the_key(change):
    assert EngineSettings(**change).key_dict() != EngineSettings().key_dict()


@pytest.mark.parametrize("method", ["hf", "mp2", "ccsd(t)", "b3lyp"])
@pytest.mark.parametrize("change", [{"broken_symmetry": True}, {"stability": True}])
def test_reference_changing_settings_are_in_every_method_key(method, change):
    # Both can move the SCF to another solution, and every method is built on it.
    assert EngineSettings(**change).key_dict(method) != EngineSettings().key_dict(method)


def test_key_dict_rebuilds_the_settings():
    # The planner stores key_dict() and the batch rebuilds EngineSettings from it.
    settings = EngineSettings(broken_symmetry=True, stability=True, reference="unrestricted")
    assert EngineSettings.from_key_dict(settings.key_dict()) == settings


def test_broken_symmetry_needs_an_unrestricted_reference():
    assert EngineSettings(broken_symmetry=True, reference="unrestricted").broken_symmetry
    for reference in ("restricted", "restricted-open"):
        with pytest.raises(EngineSetupError, match="broken_symmetry needs an unrestricted"):
            EngineSettings(broken_symmetry=True, reference=reference)


def test_constraints_are_checked_and_written_for_geometric():
    from pesflow.engine.pyscf import check_constraints, constraints_text

    checked = check_constraints(
        [("distance", [0, 1], 1.1), ("angle", (2, 0, 1), 104.5), ("dihedral", (2, 0, 1, 3), -190)],
        4,
    )
    # Dihedrals are periodic: -190 degrees is +170 degrees.
    assert checked == [
        ("distance", (0, 1), 1.1),
        ("angle", (2, 0, 1), 104.5),
        ("dihedral", (2, 0, 1, 3), 170.0),
    ]
    # geomeTRIC's constraint file numbers atoms from 1.
    assert constraints_text(checked) == (
        "$set\ndistance 1 2 1.1\nangle 3 1 2 104.5\ndihedral 3 1 2 4 170\n"
    )
    assert check_constraints([], 3) == []


@pytest.mark.parametrize(
    "bad, message",
    [
        ([("torsion", (0, 1, 2, 3), 60.0)], "kind must be one of distance, angle, dihedral"),
        ([("angle", (0, 1), 90.0)], "angle takes 3 atoms"),
        ([("distance", (0, 4), 1.0)], "distinct 0-based indices below 4"),
        ([("distance", (1, 1), 1.0)], "distinct 0-based indices below 4"),
        ([("distance", (0, 1), -1.0)], "distances? must be positive"),
        ([("angle", (0, 1, 2), 180.0)], r"angle must lie in \(0, 180\)"),
        ([("dihedral", (0, 1, 2, 3), float("nan"))], "value must be finite"),
        ([("distance", (0, 1))], "must be \\(kind, atoms, value\\)"),
    ],
)
def test_bad_constraints_are_setup_errors(bad, message):
    from pesflow.engine.pyscf import check_constraints

    with pytest.raises(EngineSetupError, match=message):
        check_constraints(bad, 4)


def test_key_dict_per_method_drops_fields_that_cannot_change_it():
    fine_grid = EngineSettings(dft_grid_level=5, frozen_core=True)
    # The DFT grid does not touch a wavefunction number, nor the frozen core an SCF one.
    assert fine_grid.key_dict("mp2") == EngineSettings(frozen_core=True).key_dict("mp2")
    assert fine_grid.key_dict("hf") == EngineSettings().key_dict("hf")
    assert fine_grid.key_dict("b3lyp") == EngineSettings(dft_grid_level=5).key_dict("b3lyp")
    assert fine_grid.key_dict("B3LYP") != EngineSettings().key_dict("b3lyp")


@pytest.mark.parametrize(
    "bad",
    [
        {"reference": "rhf"},
        {"scf_ladder": ("default", "magic")},
        {"scf_ladder": ()},
        {"broken_symmetry": True, "reference": "restricted"},
        {"scf_energy_tolerance_hartree": 0.0},
        {"scf_max_iterations": 0},
    ],
)
def test_invalid_settings_are_setup_errors(bad):
    with pytest.raises(EngineSetupError):
        EngineSettings(**bad)


def test_geometry_checks_its_shape_and_keeps_angstrom_arrays():
    g = Geometry(["O", "H"], [[0, 0, 0], [0, 0, 0.97]], multiplicity=2)
    assert g.symbols == ("O", "H")
    assert g.positions_angstrom.dtype == np.float64 and g.spin == 1
    with pytest.raises(EngineSetupError, match="shape"):
        Geometry(("O", "H"), [[0, 0, 0]])
    with pytest.raises(EngineSetupError, match="atoms 1 and 3 have the same position"):
        Geometry(("O", "H", "H"), [[0, 0, 0], [0, 0, 0.97], [0, 0, 0]])


def test_get_engine():
    import pyscf

    engine = get_engine("pyscf")
    assert engine.name == "pyscf"
    assert engine.version == pyscf.__version__
    with pytest.raises(EngineSetupError, match="unknown engine"):
        get_engine("no-such-engine")


def test_importing_the_interface_does_not_import_pyscf():
    # Planning imports pesflow.engine for names and settings; it must stay cheap.
    root = Path(pesflow.__file__).resolve().parent.parent
    env = dict(os.environ, PYTHONPATH=str(root))
    code = "import sys, pesflow.engine, pesflow.engine.pyscf; print('pyscf' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "False"
