"""Set-up and administration commands: init, status, users, sites, instruments, grades."""

from __future__ import annotations

import sys
from typing import Annotated, Optional

import typer

from ..errors import InputError
from ..services import admin as svc
from ..services.status import registry_status
from ..storage.engine import get_engine, mask_url, resolve_url, session_scope, upgrade
from .common import (AsOpt, DbOpt, FormatOpt, Output, choice, emit, handle_errors, login, table,
                     transaction)

user_app = typer.Typer(help="Users and their roles.", no_args_is_help=True)
site_app = typer.Typer(help="Laboratory sites.", no_args_is_help=True)
instrument_app = typer.Typer(help="Analyzers (FTIR instruments).", no_args_is_help=True)
grade_app = typer.Typer(help="Product grades.", no_args_is_help=True)


@handle_errors
def init(db: DbOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Create or upgrade the registry database to the current schema and seed the catalog."""
    url = resolve_url(db)
    upgrade(url)
    with session_scope(get_engine(url)) as session:
        seeded = svc.seed_catalog(session)
        doc = registry_status(session, url)
    doc["catalog_seeded"] = bool(seeded)
    emit(fmt, doc, lambda: f"registry at {mask_url(url)} is at schema revision {doc['revision']}"
         + (" (property and method catalog seeded)" if seeded else ""))


@handle_errors
def status(db: DbOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Database URL (password masked), schema revision and row counts."""
    url = resolve_url(db)
    from sqlmodel import Session

    with Session(get_engine(url)) as session:
        doc = registry_status(session, url)
    def text() -> str:
        lines = [f"database: {doc['url']}", f"revision: {doc['revision'] or '(none: run specledger init)'}"
                 + ("" if doc["up_to_date"] else f"  (head is {doc['head']})")]
        lines += [f"  {k:24s} {v}" for k, v in doc["counts"].items()]
        if doc["in_service"]:
            lines.append(f"in service: {doc['in_service']['active_deployments']} active "
                         f"deployments, {doc['in_service']['versions_in_service']} versions "
                         "approved or active")
        return "\n".join(lines)
    emit(fmt, doc, text)


@user_app.command("add")
@handle_errors
def user_add(name: str,
             role: Annotated[list[str], typer.Option("--role", help="Role; repeat for several.")],
             full_name: Annotated[str, typer.Option("--full-name")] = "",
             password_stdin: Annotated[bool, typer.Option("--password-stdin",
                                                          help="Read the new user's password from stdin.")] = False,
             db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Add a user. The first user of an empty registry must be an admin and needs no --as."""
    roles = [r.strip() for item in role for r in item.split(",") if r.strip()]
    with transaction(db) as session:
        actor = None if svc.is_empty(session) else login(session, as_user)
        if password_stdin:
            new_password = sys.stdin.readline().rstrip("\n")
        else:
            new_password = typer.prompt(f"New password for {name}", hide_input=True,
                                        confirmation_prompt=True)
        user = svc.add_user(session, actor, name, roles, new_password, full_name=full_name)
    emit(fmt, user, f"user {user.name} added (roles: {', '.join(user.roles)})")


@user_app.command("list")
@handle_errors
def user_list(db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """List users and roles."""
    with transaction(db) as session:
        users = svc.list_users(session, login(session, as_user))
    rows = [{"id": u.id, "name": u.name, "roles": u.roles, "active": u.active} for u in users]
    emit(fmt, rows, lambda: table(rows))


@user_app.command("deactivate")
@handle_errors
def user_deactivate(name: str, db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Deactivate a user (users are never deleted: the audit trail names them)."""
    with transaction(db) as session:
        user = svc.deactivate_user(session, login(session, as_user), name)
    emit(fmt, user, f"user {name} deactivated")


@site_app.command("add")
@handle_errors
def site_add(name: str, timezone: Annotated[str, typer.Option("--timezone")] = "UTC",
             db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Add a laboratory site."""
    with transaction(db) as session:
        site = svc.add_site(session, login(session, as_user), name, timezone=timezone)
    emit(fmt, site, f"site {site.name} added (time zone {site.timezone})")


@instrument_app.command("add")
@handle_errors
def instrument_add(serial: str, site: Annotated[str, typer.Option("--site")],
                   spectral_range: Annotated[str, typer.Option("--range", help="High-low in cm⁻¹.")] = "4000-650",
                   resolution: Annotated[float, typer.Option("--resolution", help="cm⁻¹")] = 4.0,
                   pathlength_um: Annotated[float, typer.Option("--pathlength-um")] = 50.0,
                   description: Annotated[str, typer.Option("--description")] = "",
                   db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Register an analyzer at a site."""
    with transaction(db) as session:
        inst = svc.add_instrument(session, login(session, as_user), serial, site=site,
                                  spectral_range=spectral_range, resolution=resolution,
                                  pathlength_um=pathlength_um, description=description)
    emit(fmt, inst, f"instrument {inst.serial} added")


@instrument_app.command("event")
@handle_errors
def instrument_event(serial: str,
                     kind: Annotated[choice(svc.INSTRUMENT_EVENT_KINDS), typer.Option("--kind")],
                     note: Annotated[str, typer.Option("--note")] = "",
                     db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Record a service event; models active on the instrument become due for revalidation."""
    with transaction(db) as session:
        ev = svc.record_instrument_event(session, login(session, as_user), serial, kind, note)
    emit(fmt, ev, f"{kind} recorded for {serial}")


@grade_app.command("add")
@handle_errors
def grade_add(code: str, name: Annotated[str, typer.Option("--name")] = "",
              family: Annotated[str, typer.Option("--family")] = "gasoline",
              db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Add a product grade."""
    with transaction(db) as session:
        grade = svc.add_grade(session, login(session, as_user), code, name=name, family=family)
    emit(fmt, grade, f"grade {grade.code} added")


property_app = typer.Typer(help="Fuel properties, their limits and acceptance criteria.",
                           no_args_is_help=True)


@property_app.command("list")
@handle_errors
def property_list(db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Properties with units, plausibility limits and validation acceptance criteria."""
    from ..services.properties import list_properties

    with transaction(db) as session:
        rows = list_properties(session, login(session, as_user))
    emit(fmt, rows, lambda: table([{**r, "acceptance": ", ".join(
        f"{k}={v}" for k, v in r["overrides"].items()) or "(defaults)"} for r in rows],
        ["code", "name", "unit", "lower_limit", "upper_limit", "acceptance"]))


@property_app.command("edit")
@handle_errors
def property_edit(code: str, name: Annotated[Optional[str], typer.Option("--name")] = None,
                  unit: Annotated[Optional[str], typer.Option("--unit")] = None,
                  lower: Annotated[Optional[float], typer.Option("--lower")] = None,
                  upper: Annotated[Optional[float], typer.Option("--upper")] = None,
                  criterion: Annotated[Optional[list[str]], typer.Option(
                      "--criterion", help="NAME=VALUE acceptance override, e.g. "
                                          "max_sep_over_sigma_r=0.8; repeat.")] = None,
                  db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Edit a property (admin)."""
    from ..services.properties import edit_property

    overrides = None
    if criterion:
        overrides = {}
        for item in criterion:
            key, sep, value = item.partition("=")
            if not sep:
                raise InputError(f"--criterion {item!r} must be NAME=VALUE", field="--criterion")
            overrides[key.strip()] = value.strip()
    with transaction(db) as session:
        prop = edit_property(session, login(session, as_user), code, name=name, unit=unit,
                             lower_limit=lower, upper_limit=upper, acceptance=overrides)
    emit(fmt, prop, f"property {prop.code} updated")
