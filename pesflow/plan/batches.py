"""Packing walks into Snakemake jobs (pure functions, no I/O).

A *batch* (:class:`pesflow.plan.expand.Batch`, made by
:func:`pesflow.plan.expand.make_batches`) is an ordered walk, or a chunk of one, at one
basis and SCF family.  A *job* is what one Snakemake job runs: several batches, one
after the other, in one Python process, so that the process start-up (interpreter,
PySCF import, Snakemake's bookkeeping: about a second) is paid once per job rather
than once per walk.

Rules (:func:`plan_jobs`):

* the jobs' number is a multiple of the cores near ``total / target_job_s`` (estimated
  seconds: the batches' weights, when the cost model's size weights are given), so
  that a job's start-up (~1 s) is small against its work and every core gets the same
  number of jobs;
* walks are laid end to end, those of one molecule at one basis (its scans and its
  fragments) next to each other, and cut where a job's share is full (McNaughton's
  wrap-around rule for splittable work): every job gets the same estimated work, at
  most ``jobs - 1`` walks are cut (each cut costs one SCF started without a
  neighbour's density), and a molecule's walks stay in one job unless a cut falls
  among them;
* fragments (isolated atoms for D_e) thereby ride along with their molecule's scans
  and are never jobs of their own;
* a walk of a multi-state level (excited states, followed between neighbours) is
  never cut;
* no piece of a cut walk has fewer than ``min_points`` geometries, or fewer than
  :data:`MIN_PIECE_S` seconds of work when that takes fewer geometries (expensive
  points are cut singly: the cold SCF at a cut is then negligible), nor more than
  ``max_points``; a job then takes a little more or less than its share.

>>> # jobs = plan_jobs(plan, done, cores=2, size_weight=cost.size_weights(nbf))
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, field

from pesflow.engine import method_info
from pesflow.plan.expand import Batch, _safe, make_batches

#: Default job length for local runs, seconds of estimated work: long enough that a
#: job's start-up (~1 s) is a few per cent of it, short enough to balance two cores.
TARGET_JOB_S_LOCAL = 60.0
#: A piece of a cut walk holds at least this much estimated work (and at most
#: ``min_points`` geometries are demanded for it): cutting costs one cold SCF.
MIN_PIECE_S = 2.0
#: Default job length on a cluster (a profile), seconds: scheduler latency per job is
#: tens of seconds there, so jobs are longer.
TARGET_JOB_S_CLUSTER = 1800.0


@dataclass
class Job:
    """One Snakemake job: batches run one after the other in one process."""

    job_id: str
    batches: list[Batch] = field(default_factory=list)
    weight: float = 0.0

    @property
    def n_points(self) -> int:
        return sum(len(m) for b in self.batches for _, m in b.entries)


def _unit_order(plan, batch):
    """Walks of one molecule at one basis next to each other, scans before fragments."""
    gs = plan.geometry_sets[batch.set_id]
    return gs.molecule, batch.basis, gs.role != "scan", batch.set_id


def jobs_count(total_weight: float, cores: int, n_pieces: int, target_job_s: float) -> int:
    """How many jobs: a multiple of ``cores`` near ``total / target``, at most ``n_pieces``.

    >>> jobs_count(50.0, 2, 20, 60.0), jobs_count(500.0, 2, 40, 60.0), jobs_count(5.0, 4, 3, 60.0)
    (2, 10, 3)
    """
    cores = max(1, cores)
    rounds = max(1, math.ceil(total_weight / (cores * target_job_s)))
    return max(1, min(cores * rounds, n_pieces))


def _piece(batch: Batch, entries, index: int) -> Batch:
    first_key = next(iter(entries[0][1].values()))
    stem = batch.batch_id.rsplit("-", 2)[0]
    return Batch(
        batch_id=f"{stem}-{index:03d}-{first_key[:8]}",
        set_id=batch.set_id,
        basis=batch.basis,
        family=batch.family,
        entries=list(entries),
        weight=batch.weight * len(entries) / len(batch.entries),
    )


def pack_jobs(plan, walks: list[Batch], n_jobs: int, min_points: int = 4) -> list[Job]:
    """Lay ``walks`` end to end and cut them into ``n_jobs`` jobs of equal weight.

    ``walks`` are whole walks (or chunks) in any order; they are ordered by molecule
    and basis first.  A walk is cut where a job's share is full, at the nearest
    geometry, unless a piece would hold fewer than ``min_points`` geometries (fewer
    when they hold :data:`MIN_PIECE_S` of work).
    Empty jobs are dropped; the jobs are returned heaviest first.
    """
    if not walks:
        return []
    n_jobs = max(1, n_jobs)
    walks = sorted(walks, key=lambda b: _unit_order(plan, b))
    share = sum(b.weight for b in walks) / n_jobs
    bins: list[list[Batch]] = [[]]
    loads = [0.0]
    placed = 0.0  # weight laid so far; job j ends at (j + 1) * share
    for walk in walks:
        entries, index = list(walk.entries), 1
        per_point = walk.weight / len(entries)
        # a cut costs one SCF without a neighbour's density: worth it on costly points
        least = max(1, min(min_points, math.ceil(MIN_PIECE_S / per_point))) if per_point else 1
        # Excited states are followed from neighbour to neighbour: keep such walks whole.
        whole = any(method_info(m).n_states > 1 for _, methods in entries for m in methods)
        while entries:
            room = len(bins) * share - placed
            take = len(entries) if per_point <= 0 else int(round(room / per_point))
            if whole or len(bins) == n_jobs or take >= len(entries) or len(entries) - take < least:
                take = len(entries)  # the last job, or the walk fits, or the rest is tiny
            elif take < least:
                if bins[-1]:  # too little room for a piece: start the next job
                    bins.append([])
                    loads.append(0.0)
                    continue
                # points so costly that one piece overfills a job: take it anyway
                take = len(entries) if len(entries) - least < least else least
            piece = walk if take == len(walk.entries) else _piece(walk, entries[:take], index)
            bins[-1].append(piece)
            loads[-1] += piece.weight
            placed += piece.weight
            entries, index = entries[take:], index + 1
            if placed >= len(bins) * share * (1 - 1e-9) and len(bins) < n_jobs:
                bins.append([])
                loads.append(0.0)
    jobs = []
    for j in sorted(range(len(bins)), key=lambda j: -loads[j]):
        if not bins[j]:
            continue
        members = bins[j]
        digest = hashlib.sha1("".join(b.batch_id for b in members).encode()).hexdigest()[:8]
        first = plan.geometry_sets[members[0].set_id].molecule
        jobs.append(
            Job(
                job_id=f"job{len(jobs) + 1:03d}-{_safe(first)}-{digest}",
                batches=members,
                weight=loads[j],
            )
        )
    return jobs


def plan_jobs(
    plan,
    done: set[str],
    cores: int = 2,
    *,
    size_weight: dict[tuple[str, str], float] | None = None,
    walk_seconds=None,
    target_job_s: float = TARGET_JOB_S_LOCAL,
    min_points: int = 4,
    max_points: int = 250,
) -> list[Job]:
    """The jobs of a run: the pending points' walks packed as the module describes.

    ``size_weight`` (estimated seconds of one SCF point per (molecule, basis), from
    :func:`pesflow.plan.cost.size_weights`) makes the weights seconds; without it they
    are relative and ``target_job_s`` is read in the same relative units.
    ``walk_seconds`` (a function of a walk, e.g. :func:`pesflow.plan.cost.walk_seconds`)
    replaces the walks' weights by the cost model's seconds.
    """
    # whole walks (cut only above max_points geometries)
    walks = make_batches(
        plan,
        done,
        cores=1,
        batches_per_core=1,
        min_points_per_batch=10**9,
        max_points_per_batch=max_points,
        size_weight=size_weight,
    )
    if not walks:
        return []
    if walk_seconds is not None:
        for walk in walks:
            walk.weight = float(walk_seconds(walk))
    total = sum(b.weight for b in walks)
    n_points = sum(len(b.entries) for b in walks)
    n_jobs = jobs_count(total, cores, max(1, n_points // min_points), target_job_s)
    return pack_jobs(plan, walks, n_jobs, min_points=min_points)
