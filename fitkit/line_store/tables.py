"""The store's tables, as SQLAlchemy Core objects (schema version: the Alembic head).

captures: one row per stored capture.
    file_sha256 + analysis is unique: the same file under the same analysis
    is stored once (idempotent appends).
    analysis: "design <sha256 of the design file>" (check mode) or "fit <form>".
    board_serial, serial_source: the board's serial and where it came from.
    captured_at: when the capture was made, by the bench's clock (no time zone),
    time_source: where that came from (a header field or the file's modification time).
    status: pass / fail / inconclusive (check), fitted (fit), or no-step /
    fit-failed / unreadable (nothing measured; reason says why).
    warnings: JSON list of strings.

capture_values: one row per capture and measured value.
    kind: "quantity" (behavioural: tau, f0, Q, gain, derived quantities),
    "part" (a part's implied value from the board check, by designator) or
    "component" (a component value from a fit with a topology).
    value, ci_low, ci_high in SI units (unit); limit_low, limit_high, nominal:
    what the design judges it against (check mode); verdict: within /
    outside / cannot tell / not determined.
"""

from __future__ import annotations

from sqlalchemy import (Boolean, Column, DateTime, Float, ForeignKey, Integer, MetaData, String, Table, Text,
                        UniqueConstraint)

metadata = MetaData()

captures = Table(
    "captures", metadata,
    Column("id", Integer, primary_key=True, autoincrement=True),
    Column("file_sha256", String(64), nullable=False),
    Column("analysis", String(200), nullable=False),
    Column("design_name", String(300)),
    Column("design_sha256", String(64)),
    Column("board_serial", String(100)),
    Column("serial_source", String(200), nullable=False),
    Column("captured_at", DateTime),
    Column("time_source", String(200), nullable=False),
    Column("fixture", String(200), nullable=False),
    Column("file_name", String(1000), nullable=False),
    Column("status", String(20), nullable=False),
    Column("verdict", String(20)),
    Column("model", String(60)),
    Column("reason", Text, nullable=False),
    Column("warnings", Text, nullable=False),
    Column("fitkit_version", String(40), nullable=False),
    Column("stored_at", DateTime, nullable=False),
    UniqueConstraint("file_sha256", "analysis", name="one_row_per_file_and_analysis"),
)

capture_values = Table(
    "capture_values", metadata,
    Column("capture_id", Integer, ForeignKey("captures.id", ondelete="CASCADE"), primary_key=True),
    Column("kind", String(20), primary_key=True),
    Column("name", String(100), primary_key=True),
    Column("value", Float),
    Column("ci_low", Float),
    Column("ci_high", Float),
    Column("unit", String(20), nullable=False),
    Column("determined", Boolean, nullable=False),
    Column("limit_low", Float),
    Column("limit_high", Float),
    Column("nominal", Float),
    Column("verdict", String(30)),
)
