"""The ``specledger`` command line: assembles the sub-apps in ``registry/commands``."""

from __future__ import annotations

import typer

from .commands import admin

app = typer.Typer(
    name="specledger", no_args_is_help=True, pretty_exceptions_enable=False,
    help="Calibration-set design and model lifecycle registry for infrared fuel-property "
         "models. Model results do not replace the specification test method.")

app.command("init")(admin.init)
app.command("status")(admin.status)
app.add_typer(admin.user_app, name="user")
app.add_typer(admin.site_app, name="site")
app.add_typer(admin.instrument_app, name="instrument")
app.add_typer(admin.grade_app, name="grade")
app.add_typer(admin.property_app, name="property")


def _register_optional() -> None:
    """Sub-apps of later concerns register themselves here (one module each)."""
    import importlib

    for module_name in ("intake", "calibration", "models", "selection", "lifecycle", "lineage", "demo"):
        try:
            module = importlib.import_module(f"registry.commands.{module_name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"registry.commands.{module_name}":
                continue
            raise
        module.register(app)


_register_optional()


def main() -> None:
    app()


if __name__ == "__main__":
    main()
