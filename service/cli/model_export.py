"""Commands about the embedding model: export it to ONNX ahead of first use."""

from __future__ import annotations

import typer

from models.errors import InputError, StoreError
from service.cli.base import app, out, print_json, workspace

model_app = typer.Typer(help="The embedding model: export it for ONNX Runtime.", no_args_is_help=True)
app.add_typer(model_app, name="model")


@model_app.command("export")
def export_cmd(
    int8: bool = typer.Option(
        False, "--int8", help="Export the int8 graph; refused unless SOUNDING_EMBED_QUANTIZE=int8."
    ),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON."),
) -> None:
    """Export the embedding model to ONNX in the data directory (otherwise done at first use)."""
    ws = workspace()
    s = ws.settings
    if int8 and s.embed_quantize != "int8":
        raise InputError(
            "int8 vectors are approximate (their nearest neighbours differ from the fp32 "
            "model's), so they are only used when asked for",
            field="embed_quantize",
            value=s.embed_quantize,
            hint="set SOUNDING_EMBED_QUANTIZE=int8, then re-import the history to re-embed it",
        )
    if s.embed_backend == "torch":
        raise InputError(
            "SOUNDING_EMBED_BACKEND is torch, which uses no export",
            field="embed_backend",
            value=s.embed_backend,
            hint="set SOUNDING_EMBED_BACKEND=auto or onnx",
        )
    info = ws.embedder.prepare().info()
    if as_json:
        print_json(info)
    elif info["backend"] == "onnx":
        out.print(f"ONNX export ready ({info['quantize']}): {info.get('export')}")
    else:
        raise StoreError(
            f"no ONNX export: {info.get('fallback')}",
            hint="see the warning above; SOUNDING_EMBED_BACKEND=torch works without",
        )
