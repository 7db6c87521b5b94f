"""Packing walks into Snakemake jobs (pesflow.plan.batches).

The rules checked are pesflow's own (module docstring of pesflow.plan.batches);
cutting walks laid end to end where each job's share is full is McNaughton's
wrap-around rule for splittable work (common practice; from memory: it reaches the
optimal makespan, max(total / jobs, largest piece)).
"""

from collections import Counter

from pesflow.campaign import load_campaign
from pesflow.plan.batches import jobs_count, pack_jobs, plan_jobs
from pesflow.plan.expand import expand, make_batches

MOLECULES = ["H2", "LiH", "HF", "H2O", "NH3", "CH4", "CO", "N2", "HCN", "C2H2"]


def many_molecules(tmp_path, points=12, fragments=False):
    lines = ["campaign: pack-test", "molecules:"]
    for m in MOLECULES:
        frag = ", fragments: [{atoms: [1]}, {atoms: [2]}]" if fragments and m == "HF" else ""
        lines.append(f"  {m.lower()}: {{builtin: {m}{frag}}}")
    lines += [
        "scans:",
        "  stretch:",
        f"    molecules: [{', '.join(m.lower() for m in MOLECULES)}]",
        "    coordinates:",
        f"      - {{type: distance, atoms: [1, 2], from: 0.9, to: 1.3, points: {points}}}",
        "levels:",
        "  - {method: [hf, mp2], basis: [sto-3g, 6-31g]}",
    ]
    path = tmp_path / "c.yaml"
    path.write_text("\n".join(lines) + "\n")
    return expand(load_campaign(path), version="test")


def keys_of(jobs):
    return [
        k for j in jobs for b in j.batches for _, methods in b.entries for k in methods.values()
    ]


def test_every_pending_point_is_in_exactly_one_job(tmp_path):
    plan = many_molecules(tmp_path)
    done = set(plan.points["key"][::3])
    jobs = plan_jobs(plan, done, cores=2)
    seen = keys_of(jobs)
    assert len(seen) == len(set(seen))
    assert set(seen) == set(plan.points["key"]) - done
    assert plan_jobs(plan, set(plan.points["key"]), cores=2) == []


def test_cheap_walks_share_few_jobs_one_per_core(tmp_path):
    # 20 walks of ~1 s each: far below a job's target length, so one job per core
    plan = many_molecules(tmp_path)
    weights = {(gs.molecule, b): 0.02 for gs in plan.geometry_sets for b in ("sto-3g", "6-31g")}
    jobs = plan_jobs(plan, set(), cores=2, size_weight=weights)
    assert len(jobs) == 2
    assert sum(len(j.batches) for j in jobs) == 20
    loads = sorted(j.weight for j in jobs)
    assert loads[1] - loads[0] <= max(b.weight for j in jobs for b in j.batches)


def test_expensive_walks_are_cut_and_jobs_come_out_even(tmp_path):
    # 20 walks of 12 points x 5 s x 1.5 (the mp2 weight): 1800 s; jobs of ~100 s
    plan = many_molecules(tmp_path)
    weights = {(gs.molecule, b): 5.0 for gs in plan.geometry_sets for b in ("sto-3g", "6-31g")}
    jobs = plan_jobs(plan, set(), cores=2, size_weight=weights, target_job_s=100.0)
    assert len(jobs) == 18
    loads = [j.weight for j in jobs]
    # each job within min_points (4) geometries of 7.5 s of its share, 100 s
    assert all(abs(load - 100.0) <= 4 * 7.5 + 1e-9 for load in loads)
    # walks were cut (more pieces than walks), at most once per job boundary
    n_pieces = sum(len(j.batches) for j in jobs)
    assert 20 < n_pieces <= 20 + len(jobs) - 1
    for j in jobs:
        for b in j.batches:
            walks = [w for w, _ in b.entries]
            assert walks == sorted(walks)


def test_cheap_points_are_cut_no_finer_than_four_geometries(tmp_path):
    # 0.3 s x 1.5 a point: four geometries are under MIN_PIECE_S (2 s), so 4 is the floor
    plan = many_molecules(tmp_path, points=20)
    weights = {(gs.molecule, b): 0.3 for gs in plan.geometry_sets for b in ("sto-3g", "6-31g")}
    jobs = plan_jobs(plan, set(), cores=2, size_weight=weights, target_job_s=15.0)
    assert len(jobs) == 12  # shares of 15 s: 9-s walks must be cut
    assert sum(len(j.batches) for j in jobs) > 20  # some walks were cut
    assert min(len(b.entries) for j in jobs for b in j.batches) >= 4


def test_costly_points_are_cut_singly_so_two_walks_fill_two_cores(tmp_path):
    # two walks of 8 points of very different cost (as CO and HF at CCSD(T)/cc-pVTZ):
    # both cores get the same estimated work, by cutting the costly walk
    plan = many_molecules(tmp_path, points=8)
    pending = plan.points[~plan.points["molecule"].isin(["co", "hf"])]
    done = set(pending["key"]) | set(plan.points.loc[plan.points["basis"] == "6-31g", "key"])
    weights = {("co", "sto-3g"): 2.0, ("hf", "sto-3g"): 0.4}
    jobs = plan_jobs(plan, done, cores=2, size_weight=weights)
    assert len(jobs) == 2
    loads = sorted(j.weight for j in jobs)
    assert loads[1] - loads[0] <= 2 * 1.5 * 2.0  # within one costly point either side


def test_fragments_join_other_work(tmp_path):
    plan = many_molecules(tmp_path, fragments=True)
    weights = {(gs.molecule, b): 0.05 for gs in plan.geometry_sets for b in ("sto-3g", "6-31g")}
    jobs = plan_jobs(plan, set(), cores=2, size_weight=weights)
    for j in jobs:
        roles = {plan.geometry_sets[b.set_id].role for b in j.batches}
        assert "scan" in roles
    # a fragment walk sits in the job of its molecule's scan at the same basis
    where = {}
    for j in jobs:
        for b in j.batches:
            gs = plan.geometry_sets[b.set_id]
            where.setdefault((gs.molecule, b.basis), set()).add(j.job_id)
    assert all(len(ids) == 1 for ids in where.values())


def test_wrap_around_packing_of_given_walks(tmp_path):
    plan = many_molecules(tmp_path)
    walks = make_batches(plan, set(), cores=1, batches_per_core=1, min_points_per_batch=10**9)
    for i, b in enumerate(walks):
        b.weight = float(12 * (1 + i % 5))  # uneven walks: 1..5 s a point
    jobs = pack_jobs(plan, walks, 4)
    assert len(jobs) == 4
    by_walk = Counter()
    for j in jobs:
        for b in j.batches:
            by_walk[b.set_id, b.basis] += len(b.entries)
    assert by_walk == Counter({(b.set_id, b.basis): len(b.entries) for b in walks})
    loads = [j.weight for j in jobs]
    assert sum(loads) == sum(b.weight for b in walks)
    # each job within one geometry (at most 5 s) of its share, give or take min_points
    share = sum(loads) / 4
    assert all(abs(load - share) <= 4 * 5.0 for load in loads)


def test_job_count_is_a_multiple_of_the_cores():
    assert jobs_count(50.0, 2, 20, 60.0) == 2
    assert jobs_count(130.0, 2, 20, 60.0) == 4
    assert jobs_count(1000.0, 4, 100, 60.0) == 20
    assert jobs_count(1000.0, 4, 7, 60.0) == 7  # never more jobs than pieces
