"""The service side of sounding: store, import, workspace, HTTP API and CLI."""

__version__ = "0.1.0"
