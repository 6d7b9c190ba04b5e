"""The demo scenarios, one module per fluid (raw/generate_demo.py assembles them); the
shared building blocks are in :mod:`demo_scenarios.common`."""
