"""``reportgen verify``: re-make a past run from its record and say whether it reproduces.

The inputs are checked against the record before any fit; the recorded spec (report date, seeds and
sampler settings included) is rerun into a temporary folder; the two folders are judged by
``runs.verify``; the temporary folder is removed. With ``out``, the rerun and verification.json are
published there in one step, like any run's outputs.
"""

from __future__ import annotations

import json
import shutil
import tempfile
from dataclasses import replace
from pathlib import Path

from reportgen import runner
from reportgen.execution.executors import ExecutorChoice
from reportgen.fit import Fitter
from reportgen.runs import publish
from reportgen.runs.snapshot import RECORD_FILE, load_run
from reportgen.runs.verify import (
    Verification,
    check_inputs,
    judge,
    previous_folder,
    recorded_spec,
    verification_json,
)

VERIFICATION_FILE = "verification.json"


def verify_run(run_dir: Path, data: Path | None = None, out: Path | None = None, *,
               command_line: list[str] | None = None, fitter: Fitter | None = None,
               executor: ExecutorChoice | None = None) -> Verification:
    """Rerun the run recorded in ``run_dir`` and judge it against the original.

    ``data`` replaces the recorded data path (a data file that moved; its hash must still match).
    ``out`` keeps the rerun there, with verification.json. ``fitter`` may carry compiled models.
    ``executor`` says where the rerun's pairs are fitted (default None: in this process).

    Raises
    ------
    ReportgenError
        A folder without a usable record.json, or inputs that are not the recorded ones (exit 2).
    """
    run_dir = Path(run_dir)
    snapshot = load_run(run_dir)
    where = run_dir / RECORD_FILE
    notes = check_inputs(snapshot.record, data, where=where)
    spec = recorded_spec(snapshot.record, data, where=where)
    cores = (snapshot.reproducible.get("sampler") or {}).get("cores")
    # the recorded core count: it is part of the printed record, and a fitter of another count prints another
    if fitter is None or fitter.sampler != spec.document.sampler or (cores and fitter.cores != cores):
        fitter = Fitter(spec.document.sampler, cores=cores if isinstance(cores, int) else None)
    line = command_line if command_line is not None else ["reportgen", "verify", str(run_dir)]
    with tempfile.TemporaryDirectory(prefix="reportgen-verify-") as scratch:
        rerun = Path(scratch) / "rerun"
        earlier = previous_folder(snapshot.record)  # a run with --previous is rerun with it
        runner.run(spec, rerun, command_line=line, fitter=fitter, executor=executor,
                   **({"previous": earlier} if earlier else {}))
        verification = judge(run_dir, rerun)
        verification = replace(verification, notes=(*notes, *verification.notes),
                               rerun=str(out) if out is not None else None)  # the scratch folder is gone
        if out is not None:
            publish_rerun(rerun, out, verification)
    return verification


def publish_rerun(rerun: Path, out: Path, verification: Verification) -> None:
    """The rerun's files and verification.json into ``out``, replacing the folder in one step."""
    outputs = frozenset({*runner.OUTPUT_FILES, VERIFICATION_FILE})
    with publish.publishing(out, outputs) as publication:
        for path in rerun.iterdir():
            if path.name == publish.SUMS:
                continue  # written again on commit, to cover verification.json too
            if path.is_dir():
                shutil.copytree(path, publication.staging / path.name)
            else:
                shutil.copy2(path, publication.staging / path.name)
        text = json.dumps(verification_json(verification), indent=2, ensure_ascii=False) + "\n"
        (publication.staging / VERIFICATION_FILE).write_text(text, encoding="utf-8")
        publication.commit()
