"""Many captures: the same per-capture pipeline over files, folders and glob patterns.

    run = run_batch(["captures/"], BatchSettings(model="auto"), "out/", workers=2)
    write_summary(run, "out/")          # summary.csv/.parquet/.json, problems.csv
    status = batch_exit_status(run)     # 0 when every capture was fitted / passed
"""

from .discover import BatchInput, content_hash, discover_inputs
from .runner import BatchPlan, BatchRun, plan_batch, run_batch
from .summary import (batch_exit_status, batch_limits, problems_frame, quantity_spread, summary_frame,
                      write_summary)
from .worker import STATUSES, BatchSettings, process_capture

__all__ = ["BatchInput", "content_hash", "discover_inputs", "BatchPlan", "BatchRun", "plan_batch",
           "run_batch", "batch_exit_status", "batch_limits", "problems_frame", "quantity_spread", "summary_frame",
           "write_summary", "STATUSES", "BatchSettings", "process_capture"]
