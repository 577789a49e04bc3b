"""Writing results to disk: every file is written to a temporary name and renamed, so no partial file is left."""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path


def write_atomic(path: Path, text: str | bytes) -> None:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    mode = "wb" if isinstance(text, bytes) else "w"
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, mode, **({} if mode == "wb" else {"encoding": "utf-8"})) as fh:
            fh.write(text)
        os.chmod(tmp, 0o666 & ~_umask())     # mkstemp makes 0600; results are meant to be shared
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_json(path: Path, obj) -> None:
    write_atomic(path, json.dumps(obj, indent=2, allow_nan=False, default=str) + "\n")


def save_inputs(directory: Path, study) -> None:
    """The study text and included network files as read (under the names the study uses for them, which the
    loader keeps inside the study's folder), and sources.json, from which the report rebuilds the study in memory."""
    inputs = Path(directory) / "inputs"
    write_atomic(inputs / (Path(study.path).name or "study.toml"), study.source)
    for f in study.includes:
        write_atomic(inputs / f.ref, f.text)
    write_atomic(inputs / SOURCES, study.sources_json())


SOURCES = "sources.json"

# What each job saves with --save, under one name the command line writes and the report reads.
SAVED = {
    "optimize": "optimum.json",
    "optimize-profile": "optimum-profile.csv",
    "front": "front.json",
    "front-table": "front.csv",
    "window": "window.json",
    "sweep-report": "sweep-summary.json",
    "fit": "fit.json",
    "fit-network": "fitted-network.toml",
    "fit-covariance": "fit-covariance.csv",
    "robust": "robust.json",
}


def saved(directory, what: str) -> Path:
    """Where `what` (a key of SAVED) is saved in a results directory."""
    return Path(directory) / SAVED[what]


def save_result(directory: Path, job: str, result, study) -> None:
    """The result of `job` (SAVED[job]) and, when it has a profile, SAVED[job + "-profile"]; and the inputs."""
    write_json(saved(directory, job), result.to_dict())
    if result.profile is not None:
        write_atomic(saved(directory, f"{job}-profile"), result.profile.to_csv(index=False))
    save_inputs(directory, study)
