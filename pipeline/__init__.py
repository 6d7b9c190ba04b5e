"""FluidLedger: curate pure-fluid phase-boundary data into a trusted DuckDB store."""

__version__ = "0.1.0"
