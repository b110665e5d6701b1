"""The per-capture job of a batch: read, fit (or check), and return a plain record.

``process_capture`` is a top-level function of plain, picklable arguments, so
it runs the same in this process, in a local process pool and on a Dask
worker. It never raises for a bad capture: every outcome, including an
unreadable file, becomes a record with a status and a reason, so a batch
accounts for every file it was given.
"""

from __future__ import annotations

import time
import warnings as pywarnings
from dataclasses import asdict, dataclass, field
from typing import Any

#: Every status a batch row can have, in the order a summary reports them.
#:   fitted        fit mode: the capture was fitted (warnings may still apply)
#:   pass / inconclusive / fail   check mode: the board's verdict against its design
#:   no-step       the file was read but holds no usable step (flat trace, no edge)
#:   fit-failed    a step was found but the fit did not converge or determines nothing
#:   not-described fit mode: the best fit does not describe the capture (residuals far
#:                 above the noise, structured); its numbers are not measurements
#:   unreadable    the file cannot be read as a capture (garbage, empty, bad channel)
#:   missing       a name given on the command line matched no file
#:   error         a bug in fitkit or a worker that died; the reason says which
STATUSES = ("fitted", "pass", "inconclusive", "fail", "no-step", "fit-failed", "not-described", "unreadable",
            "missing", "error")

#: Statuses of a capture that yielded quantities.
MEASURED_STATUSES = ("fitted", "pass", "inconclusive", "fail")


@dataclass(frozen=True)
class BatchSettings:
    """What to do with each capture; all of it is part of the resume key.

    model: form name or "auto" (automatic form selection).
    input, output: channel names or 1-based positions (None: chosen from the data).
    average: coherently average the edges of each capture before fitting.
    design: path of a design file (check mode) or None (fit mode).
    design_hash: SHA-256 of the design file's bytes (editing the design redoes the batch).
    read_options: keyword arguments for fitkit.io.load_capture (None values are dropped).
    """

    model: str = "auto"
    input: str | None = None
    output: str | None = None
    average: bool = False
    design: str | None = None
    design_hash: str | None = None
    read_options: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        cleaned = {k: v for k, v in sorted(self.read_options.items()) if v is not None}
        object.__setattr__(self, "read_options", cleaned)

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


def _quantities(result) -> dict[str, dict[str, Any]]:
    """A FitResult's parameters, derived quantities and components, flattened by name
    (parameters win over a derived quantity of the same name)."""
    out: dict[str, dict[str, Any]] = {}
    for kind, table in (("parameter", result.parameters), ("derived", result.derived),
                        ("component", result.components)):
        for name, est in table.items():
            if name in out:
                continue
            d = est.to_dict()
            d["kind"] = kind
            out[name] = d
    return out


def _part_values(outcome) -> dict[str, dict[str, Any]]:
    """Check mode: each part's implied value and interval, by the design's part name."""
    out = {}
    for part in getattr(outcome, "components", ()):
        d = part.to_dict()
        out[part.part] = {"value": d.get("value"), "stderr": None, "ci95": d.get("ci95"),
                          "unit": d.get("unit") or "", "interval_method": "single-part fit",
                          "determined": d.get("value") is not None and d.get("ci95") is not None,
                          "kind": "component"}
    return out


def _limits_and_verdicts(outcome) -> tuple[dict[str, list], dict[str, str]]:
    """Check mode: the limits each quantity and part is judged against (SI units), and its verdict."""
    limits: dict[str, list] = {}
    verdicts: dict[str, str] = {}
    for q in getattr(outcome, "quantities", ()):
        limits[q.name] = [q.low, q.high]
        verdicts[q.name] = q.verdict
    for part in getattr(outcome, "components", ()):
        limits[part.part] = [part.low, part.high]
        verdicts[part.part] = part.verdict
    return limits, verdicts


def error_reason(err) -> str:
    """A FitkitError as one line *without* the file name (the row names the file,
    and the same record serves every file with identical content)."""
    text = (f"line {err.line}: " if err.line else "") + err.message.rstrip(". ")
    if err.hint:
        text += "; " + err.hint.rstrip(". ")
    return " ".join(text.split())


def process_capture(path: str, settings: BatchSettings) -> dict[str, Any]:
    """Run the pipeline on one file and return its record (never raises for bad input).

    The record holds: file, status (one of STATUSES), reason (plain words, ""
    when all went well; in check mode the check's one-line summary), model,
    verdict (check mode, else None), quantities
    {name: {value, stderr, ci95, unit, interval_method, determined, kind}} in
    SI units, warnings (list of strings), result (the full fit or check as a
    JSON-ready dict, or None), elapsed_s (seconds spent on this capture);
    in check mode also limits {name: [low, high]} and verdicts {name: verdict}
    for the judged quantities and parts (quantities then include the parts'
    implied values).
    """
    from ..errors import CaptureError, ConditioningError, FitError, FitkitError

    started = time.perf_counter()
    record: dict[str, Any] = {"file": path, "status": "error", "reason": "", "model": None,
                              "verdict": None, "quantities": {}, "warnings": [], "result": None}
    try:
        with pywarnings.catch_warnings():
            # numerical libraries' own warnings (lmfit, scipy) are not ours to print
            pywarnings.simplefilter("ignore")
            _run_pipeline(path, settings, record)
    except ConditioningError as err:
        record["status"], record["reason"] = "no-step", error_reason(err)
    except FitError as err:
        record["status"], record["reason"] = "fit-failed", error_reason(err)
    except (CaptureError, FitkitError) as err:
        record["status"], record["reason"] = "unreadable", error_reason(err)
    except MemoryError:
        record["status"], record["reason"] = "error", "out of memory while processing this capture"
    except Exception as err:  # a bug: keep the batch going and say so in the summary
        record["status"] = "error"
        record["reason"] = (f"internal error {type(err).__name__}: {err} "
                            "(a bug in fitkit; please report it with this file)")
    record["elapsed_s"] = time.perf_counter() - started
    return record


def _run_pipeline(path: str, settings: BatchSettings, record: dict[str, Any]) -> None:
    from ..io import load_capture
    from ..io.pairs import capture_files

    files = capture_files(path)  # one file, or the input and output files of a pair
    capture = load_capture(files[0], second_path=files[1] if len(files) > 1 else None, **settings.read_options)
    if settings.design:
        from ..check import check_capture  # the board-check layer
        outcome = check_capture(capture, settings.design, input=settings.input,
                                output=settings.output, average=settings.average)
        record["verdict"] = outcome.verdict
        record["status"] = outcome.verdict
        record["model"] = outcome.fit.model
        record["quantities"] = _quantities(outcome.fit)
        record["quantities"].update(_part_values(outcome))
        record["limits"], record["verdicts"] = _limits_and_verdicts(outcome)
        record["warnings"] = list(outcome.warnings)
        record["reason"] = outcome.summary
        record["result"] = outcome.to_dict()
    else:
        from ..fitting import fit_capture
        result = fit_capture(capture, model=settings.model, input=settings.input,
                             output=settings.output, average=settings.average)
        record["status"] = "fitted" if result.describes_data else "not-described"
        if not result.describes_data:
            record["reason"] = result.adequacy.finding + "".join(f"; would work: {f}" for f in result.adequacy.fixes)
        record["model"] = result.model
        record["quantities"] = _quantities(result) if result.describes_data else {}
        record["warnings"] = list(result.warnings)
        record["result"] = result.to_dict()


def die_with_parent(parent_pid: int) -> None:
    """Initializer of a local pool's worker: the worker ends when the batch process does.

    On Linux the kernel sends SIGKILL to the worker when its parent dies
    (prctl PR_SET_PDEATHSIG); elsewhere, and as a second guard, a daemon
    thread checks once a second that the parent is still the one that started
    it. So a batch killed with SIGKILL leaves no worker running.
    """
    import os
    import signal
    import sys
    import threading

    pywarnings.simplefilter("ignore")  # numerical warnings never reach the terminal
    if sys.platform.startswith("linux"):
        try:
            import ctypes
            libc = ctypes.CDLL(None, use_errno=True)
            pr_set_pdeathsig = 1
            libc.prctl(pr_set_pdeathsig, int(signal.SIGKILL), 0, 0, 0)
        except (OSError, AttributeError):
            pass
    if os.getppid() != parent_pid:  # the parent died before the guard was set
        os._exit(1)

    def watch() -> None:
        while True:
            time.sleep(1.0)
            if os.getppid() != parent_pid:
                os._exit(1)

    threading.Thread(target=watch, name="fitkit-parent-watch", daemon=True).start()
