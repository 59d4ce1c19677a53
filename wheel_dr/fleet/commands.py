"""``compare`` and ``calibrate`` on the Dask engine when they are given ``--scheduler`` (one task per bag)."""
from __future__ import annotations

from pathlib import Path
from typing import Any, Sequence

from .engine import map_ordered

__all__ = ["compare_on_cluster", "prepare_on_cluster"]


def _compare_task(item: tuple) -> Any:
    from ..runs import _whole_bag
    path, label, sfs, opts = item
    return _whole_bag(path, label, sfs, opts)


def compare_on_cluster(bags: Sequence[str], settings_files: Sequence, opts: dict, scheduler: str,
                       workers: int | None, progress: bool):
    """``wheel_dr.runs.compare_bags`` with each bag (decoded once, every settings file run on
    it) as one task on the cluster; the result is the same CompareResult, in bag then settings order."""
    from ..runs import CompareResult, _bag_label
    labels = [_bag_label(b, bags) for b in bags]
    items = [(str(b), lb, list(settings_files), opts) for b, lb in zip(bags, labels)]
    out = map_ordered(_compare_task, items, scheduler, workers, "compare" if progress else None)
    result = CompareResult([])
    for label, evs, notes, info in out:
        result.evaluations.extend(evs)
        result.notes[label] = notes
        result.bag_info[label] = info
    return result


def _prepare_task(item: tuple) -> Any:
    from ..analysis.calibration import prepare_run
    from ..calibrate_cmd import load_bag
    path, truth, joint_topic, settings = item
    samples, truth_path = load_bag(path, truth, joint_topic)
    name = Path(path).name
    return name, samples, truth_path, prepare_run(samples, truth_path, settings, name)


def prepare_on_cluster(paths: Sequence[str], truth: str, joint_topic: str | None, settings, scheduler: str,
                       workers: int | None) -> list:
    """``calibrate``'s per-bag preparation (decode, wheel increments, truth at the joint stamps) as one
    task per bag on the cluster; the joint fit then runs in the client, as without a cluster."""
    items = [(str(p), truth, joint_topic, settings) for p in paths]
    return map_ordered(_prepare_task, items, scheduler, workers, None)
