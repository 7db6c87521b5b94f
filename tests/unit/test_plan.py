"""Planning: expansion into points, stable content keys, batches."""

import textwrap
from pathlib import Path

import numpy as np

from pesflow.campaign import load_campaign
from pesflow.coordinates import geometry as coordinates
from pesflow.plan import keys
from pesflow.plan.expand import expand, make_batches, points_frame

SPEC = """\
campaign: plan-test
molecules:
  hf_molecule: {builtin: HF}
  water: {builtin: H2O}
scans:
  stretch:
    molecules: [hf_molecule]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.8, to: 1.2, points: 9}
  grid:
    molecules: [water]
    coordinates:
      - {type: distance, atoms: [1, 2], values: [0.9, 1.0, 1.1]}
      - {type: distance, atoms: [1, 3], values: [0.9, 1.0]}
levels:
  - {method: [hf, mp2], basis: sto-3g}
  - {method: b3lyp, basis: sto-3g}
"""


def campaign(text=SPEC, name="c.yaml"):
    Path(name).write_text(textwrap.dedent(text))
    return load_campaign(name)


def test_expansion_counts_and_columns():
    plan = expand(campaign(), version="test")
    # (9 stretch + 6 grid points) x 3 levels
    assert len(plan.points) == (9 + 6) * 3
    assert plan.points["key"].is_unique
    frame = points_frame(plan)
    stretch = frame[(frame.scan == "stretch") & (frame.level == "hf/sto-3g")]
    np.testing.assert_allclose(stretch["r_angstrom"], np.linspace(0.8, 1.2, 9))
    grid = frame[(frame.scan == "grid") & (frame.level == "hf/sto-3g")]
    assert set(zip(grid["r_angstrom"], grid["r2_angstrom"])) == {
        (a, b) for a in (0.9, 1.0, 1.1) for b in (0.9, 1.0)
    }


def test_geometries_hold_their_scan_values():
    plan = expand(campaign(), version="test")
    for gs in plan.geometry_sets:
        for j, (kind, atoms) in enumerate(zip(gs.coordinate_kinds, gs.coordinate_atoms)):
            measured = coordinates.measure_many(gs.positions, kind, atoms)
            np.testing.assert_allclose(measured, gs.values[:, j], atol=1e-7)


def test_grid_walk_is_serpentine():
    plan = expand(campaign(), version="test")
    grid = next(gs for gs in plan.geometry_sets if gs.scan == "grid")
    steps = np.abs(np.diff(grid.grid_indices, axis=0)).sum(axis=1)
    assert np.all(steps == 1), "consecutive grid points must be neighbours"


def test_keys_are_stable_and_content_addressed():
    a = expand(campaign(), version="test")
    b = expand(campaign(name="other.yaml"), version="test")
    assert list(a.points["key"]) == list(b.points["key"])
    # another campaign name or scan name does not change the key of the same geometry
    renamed = SPEC.replace("plan-test", "renamed").replace("stretch:", "hf_curve:")
    c = expand(campaign(renamed, "r.yaml"), version="test")
    assert set(a.points["key"]) == set(c.points["key"])
    # the engine version and every result-changing setting are part of the key
    assert set(expand(campaign(), version="other").points["key"]).isdisjoint(a.points["key"])
    tighter = SPEC + "engine: {scf_energy_tolerance_hartree: 1.0e-9}\n"
    assert set(expand(campaign(tighter, "t.yaml"), version="test").points["key"]).isdisjoint(
        a.points["key"]
    )


def test_key_matches_single_point_function():
    plan = expand(campaign(), version="test")
    row = plan.points.iloc[3]
    symbols, positions, charge, mult = plan.geometry(row.set_id, row.walk)
    key = keys.point_key(
        symbols,
        positions,
        charge,
        mult,
        row.method,
        row.basis,
        plan.method_key(row.method),
        "pyscf",
        "test",
    )
    assert key == row.key


def test_settings_that_cannot_change_a_method_do_not_split_its_cache():
    a = expand(campaign(), version="test")
    finer_grid = expand(campaign(SPEC + "engine: {dft_grid_level: 5}\n", "g.yaml"), version="test")
    hf = a.points["method"] != "b3lyp"
    assert list(a.points[hf]["key"]) == list(finer_grid.points[hf]["key"])
    assert set(a.points[~hf]["key"]).isdisjoint(finer_grid.points[~hf]["key"])


def test_batches_share_scf_and_cover_every_point_once():
    plan = expand(campaign(), version="test")
    batches = make_batches(plan, done=set(), cores=2)
    seen = [k for b in batches for _, methods in b.entries for k in methods.values()]
    assert sorted(seen) == sorted(plan.points["key"])
    for b in batches:
        methods = {m for _, ms in b.entries for m in ms}
        assert methods in ({"hf", "mp2"}, {"b3lyp"}), methods
        walks = [w for w, _ in b.entries]
        assert walks == sorted(walks)


def test_batches_skip_done_points():
    plan = expand(campaign(), version="test")
    done = set(plan.points["key"][::2])
    batches = make_batches(plan, done=done, cores=2)
    seen = {k for b in batches for _, methods in b.entries for k in methods.values()}
    assert seen == set(plan.points["key"]) - done
    assert make_batches(plan, done=set(plan.points["key"]), cores=2) == []


def test_long_scans_are_chunked_for_the_cores():
    long_scan = SPEC.replace("points: 9", "points: 120")
    plan = expand(campaign(long_scan), version="test")
    batches = make_batches(plan, done=set(), cores=2, batches_per_core=3)
    hf_stretch = [
        b for b in batches if plan.geometry_sets[b.set_id].scan == "stretch" and b.family == "hf"
    ]
    assert len(hf_stretch) >= 2
    sizes = [len(b.entries) for b in hf_stretch]
    assert sum(sizes) == 120 and min(sizes) >= 4


def test_scan_levels_override_the_campaign_levels():
    text = SPEC.replace(
        "      - {type: distance, atoms: [1, 2], from: 0.8, to: 1.2, points: 9}\n",
        "      - {type: distance, atoms: [1, 2], from: 0.8, to: 1.2, points: 9}\n"
        "    levels:\n      - {method: ccsd, basis: 6-31g}\n",
    )
    c = campaign(text, "s.yaml")
    assert [lvl.label for lvl in c.scans["stretch"].levels] == ["ccsd/6-31g"]
    assert [lvl.label for lvl in c.levels] == [
        "hf/sto-3g",
        "mp2/sto-3g",
        "b3lyp/sto-3g",
        "ccsd/6-31g",
    ]
    plan = expand(c, version="test")
    assert len(plan.points) == 9 * 1 + 6 * 3
    assert set(plan.points[plan.points.scan == "stretch"]["level"]) == {"ccsd/6-31g"}


def test_fragments_are_planned_at_the_levels_of_their_molecule():
    text = SPEC.replace(
        "hf_molecule: {builtin: HF}",
        "hf_molecule: {builtin: HF, fragments: [{atoms: [1]}, {atoms: [2]}]}",
    )
    plan = expand(campaign(text, "f.yaml"), version="test")
    frag = plan.points[plan.points.role == "fragment"]
    assert len(frag) == 2 * 3
    sets = {gs.scan: gs for gs in plan.geometry_sets if gs.role == "fragment"}
    assert sets["fragment-1"].multiplicity == 2 and sets["fragment-2"].multiplicity == 2


def test_chunks_of_a_large_basis_are_cut_shorter():
    text = SPEC.replace("points: 9", "points: 60").replace(
        "  - {method: b3lyp, basis: sto-3g}\n", "  - {method: hf, basis: cc-pvtz}\n"
    )
    plan = expand(campaign(text, "w.yaml"), version="test")
    weights = {
        ("hf_molecule", "sto-3g"): 1.0,
        ("hf_molecule", "cc-pvtz"): 20.0,
        ("water", "sto-3g"): 1.0,
        ("water", "cc-pvtz"): 20.0,
    }
    batches = make_batches(plan, set(), cores=2, size_weight=weights)

    def chunks(basis):
        return [
            len(b.entries)
            for b in batches
            if plan.geometry_sets[b.set_id].scan == "stretch" and b.basis == basis
        ]

    assert max(chunks("cc-pvtz")) < min(chunks("sto-3g"))


def test_cheap_walks_are_not_split_below_the_start_up_cost():
    plan = expand(campaign(SPEC.replace("points: 9", "points: 60"), "c2.yaml"), version="test")
    cheap = {(m, "sto-3g"): 0.02 for m in ("hf_molecule", "water")}
    batches = make_batches(plan, set(), cores=2, size_weight=cheap)
    stretch = [b for b in batches if plan.geometry_sets[b.set_id].scan == "stretch"]
    assert len(stretch) == 2  # one walk per SCF family: 60 points of 0.02 s are one job


def test_tight_binding_levels_are_planned_beside_pyscf_levels_by_engine():
    import importlib.metadata

    text = SPEC.replace("  - {method: b3lyp, basis: sto-3g}\n", "  - {method: gfn2-xtb}\n")
    plan = expand(campaign(text, "tb.yaml"), version="test")
    assert {"hf/sto-3g", "mp2/sto-3g", "gfn2-xtb"} == set(plan.points["level"])
    batches = make_batches(plan, done=set(), cores=2)
    engines = {b.family: plan.batch_engine(b) for b in batches}
    assert engines["gfn2-xtb"] == ("tblite", importlib.metadata.version("tblite"))
    assert engines["hf"] == ("pyscf", "test")
    # the key of a tight-binding point: no basis, tblite's name and version, its settings
    gs = plan.geometry_sets[0]
    row = plan.points[(plan.points.set_id == 0) & (plan.points.level == "gfn2-xtb")].iloc[0]
    expected = keys.point_key(
        gs.symbols,
        gs.positions[int(row.walk)],
        gs.charge,
        gs.multiplicity,
        "gfn2-xtb",
        "",
        {"conv_tol": 1e-10, "max_cycle": 100},
        "tblite",
        importlib.metadata.version("tblite"),
    )
    assert row.key == expected


def test_byproduct_keys_are_made_in_the_plan_and_carried_by_the_task():
    from pesflow.engine import EngineSettings
    from pesflow.execution.driver import task_dict

    text = SPEC.replace("method: [hf, mp2]", "method: [hf, ccsd(t)]")
    plan = expand(campaign(text, "t.yaml"), version="test")
    batch = next(b for b in make_batches(plan, done=set(), cores=1) if b.family == "hf")
    task = task_dict(plan, batch, "store")
    gs = plan.geometry_sets[batch.set_id]
    for point in task["points"]:
        assert set(point["keys"]) == {"hf", "ccsd(t)"}
        assert point["byproduct_keys"]["ccsd"] == keys.point_key(
            gs.symbols,
            gs.positions[point["walk"]],
            gs.charge,
            gs.multiplicity,
            "ccsd",
            "sto-3g",
            EngineSettings().key_dict("ccsd"),
            "pyscf",
            "test",
        )
