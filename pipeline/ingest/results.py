"""What an ingest did: per file, per batch and per run (``asdict`` for machines, ``asstr``
for people)."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field


@dataclass
class FileResult:
    path: str
    status: str            # loaded | unchanged
    rows_read: int = 0
    rows_loaded: int = 0
    rows_quarantined: int = 0


@dataclass
class BatchResult:
    batch: str
    status: str            # loaded | unchanged | error
    files: list[FileResult] = field(default_factory=list)
    error: str | None = None
    internal: bool = False  # the batch was refused because of a fault of the code (exit 3)

    @property
    def rows(self) -> tuple[int, int, int]:
        return tuple(sum(getattr(f, k) for f in self.files)
                     for k in ("rows_read", "rows_loaded", "rows_quarantined"))


@dataclass
class IngestResult:
    run_id: str
    batches: list[BatchResult]
    removed: list[str]

    @property
    def errors(self) -> list[BatchResult]:
        return [b for b in self.batches if b.status == "error"]

    @property
    def changed(self) -> bool:
        return bool(self.removed) or any(b.status == "loaded" for b in self.batches)

    def asdict(self) -> dict:
        return {"run_id": self.run_id, "removed": self.removed,
                "batches": [asdict(b) for b in self.batches]}

    def asstr(self) -> str:
        lines = []
        for b in self.batches:
            read, loaded, quarantined = b.rows
            detail = b.error if b.status == "error" else (
                f"{read} rows read, {loaded} loaded, {quarantined} quarantined")
            lines.append(f"{b.status:>9}  {b.batch}: {detail}")
        for path in self.removed:
            lines.append(f"{'removed':>9}  {path}")
        return "\n".join(lines)
