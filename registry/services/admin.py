"""Admin actions: users, sites, instruments, grades, and the seeded catalog."""

from __future__ import annotations

from sqlalchemy import func
from sqlmodel import Session, select

from .. import catalog
from ..errors import InputError, NotFoundError, RegistryError
from ..lifecycle.permissions import Action, Role

ROLES = tuple(r.value for r in Role)
from ..storage.models import (Grade, Instrument, InstrumentEvent, Property, ReferenceMethod,
                              Site, User)
from ..storage.revalidation_store import raise_service_triggers
from .auth import MIN_PASSWORD_LENGTH, hash_password
from .context import Actor, audit, authorize


def _user_count(session: Session) -> int:
    return session.exec(select(func.count()).select_from(User)).one()


def is_empty(session: Session) -> bool:
    """True while the registry has no user: the first one is added without logging in."""
    return _user_count(session) == 0


def add_user(session: Session, actor: Actor | None, name: str, roles: list[str], password: str,
             *, full_name: str = "") -> User:
    """Create a user. The first user of an empty registry needs no actor and must be an admin."""
    name = (name or "").strip()
    if not name or len(name) > 80 or any(c.isspace() for c in name):
        raise InputError(f"invalid user name {name!r}: 1-80 characters, no spaces", field="NAME")
    roles = sorted(set(roles))
    if not roles:
        raise InputError("a user needs at least one role", field="--role")
    unknown = [r for r in roles if r not in ROLES]
    if unknown:
        raise InputError(f"unknown role {unknown[0]!r}; roles are: {', '.join(ROLES)}", field="--role")
    if len(password or "") < MIN_PASSWORD_LENGTH:
        raise InputError(f"password must have at least {MIN_PASSWORD_LENGTH} characters",
                         field="password")
    if _user_count(session) == 0:
        if "admin" not in roles:
            raise InputError("the first user of a registry must have the admin role", field="--role")
    else:
        authorize(actor, Action.USER_ADD)
    if session.exec(select(User).where(User.name == name)).first():
        raise InputError(f"user {name!r} already exists", field="NAME")
    user = User(name=name, full_name=full_name, roles=roles, password_hash=hash_password(password))
    session.add(user)
    session.flush()
    audit(session, actor, Action.USER_ADD, entity_type="user", entity_id=user.id,
          data={"name": name, "roles": roles, "full_name": full_name})
    return user


def deactivate_user(session: Session, actor: Actor, name: str) -> User:
    authorize(actor, Action.USER_DEACTIVATE)
    user = get_user(session, name)
    if user.id == actor.id:
        raise InputError("an admin cannot deactivate their own account", field="NAME")
    if not user.active:
        raise InputError(f"user {name!r} is deactivated already", field="NAME")
    user.active = False
    session.add(user)
    audit(session, actor, Action.USER_DEACTIVATE, entity_type="user", entity_id=user.id,
          data={"name": name})
    return user


def reactivate_user(session: Session, actor: Actor, name: str) -> User:
    """Unlock a deactivated account: its user may sign in again."""
    authorize(actor, Action.USER_REACTIVATE)
    user = get_user(session, name)
    if user.active:
        raise InputError(f"user {name!r} is active already", field="NAME")
    user.active = True
    session.add(user)
    audit(session, actor, Action.USER_REACTIVATE, entity_type="user", entity_id=user.id,
          data={"name": name})
    return user


def get_user(session: Session, name: str) -> User:
    user = session.exec(select(User).where(User.name == name)).first()
    if user is None:
        raise NotFoundError(f"no user named {name!r}")
    return user


def list_users(session: Session, actor: Actor) -> list[User]:
    authorize(actor, Action.VIEW)
    return list(session.exec(select(User).order_by(User.name)).all())


def add_site(session: Session, actor: Actor, name: str, *, timezone: str = "UTC") -> Site:
    from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

    authorize(actor, Action.SITE_ADD)
    name = (name or "").strip()
    if not name:
        raise InputError("a site needs a name", field="NAME")
    try:
        ZoneInfo(timezone)
    except (ZoneInfoNotFoundError, ValueError):
        raise InputError(f"unknown time zone {timezone!r} (use an IANA name like Europe/Oslo)",
                         field="--timezone") from None
    if session.exec(select(Site).where(Site.name == name)).first():
        raise InputError(f"site {name!r} already exists", field="NAME")
    site = Site(name=name, timezone=timezone)
    session.add(site)
    session.flush()
    audit(session, actor, Action.SITE_ADD, entity_type="site", entity_id=site.id,
          data={"name": name, "timezone": timezone})
    return site


def get_site(session: Session, name: str) -> Site:
    site = session.exec(select(Site).where(Site.name == name)).first()
    if site is None:
        raise NotFoundError(f"no site named {name!r}")
    return site


def parse_range(text: str) -> tuple[float, float]:
    """``"4000-650"`` → (4000.0, 650.0), high first."""
    try:
        a, b = (float(p) for p in text.replace(" ", "").split("-", 1))
    except ValueError:
        raise InputError(f"spectral range {text!r} must look like 4000-650", field="--range") from None
    if a == b or a <= 0 or b <= 0:
        raise InputError(f"spectral range {text!r} must span positive, different wavenumbers",
                         field="--range")
    return max(a, b), min(a, b)


def add_instrument(session: Session, actor: Actor, serial: str, *, site: str,
                   spectral_range: str = "4000-650", resolution: float = 4.0,
                   pathlength_um: float = 50.0, description: str = "") -> Instrument:
    authorize(actor, Action.INSTRUMENT_ADD)
    serial = (serial or "").strip()
    if not serial:
        raise InputError("an instrument needs a serial", field="SERIAL")
    high, low = parse_range(spectral_range)
    if resolution <= 0:
        raise InputError("resolution must be positive (cm⁻¹)", field="--resolution")
    if pathlength_um <= 0:
        raise InputError("path length must be positive (µm)", field="--pathlength-um")
    site_row = get_site(session, site)
    if session.exec(select(Instrument).where(Instrument.serial == serial)).first():
        raise InputError(f"instrument {serial!r} already exists", field="SERIAL")
    inst = Instrument(serial=serial, site_id=site_row.id, range_high_cm1=high, range_low_cm1=low,
                      resolution_cm1=resolution, pathlength_um=pathlength_um,
                      description=description)
    session.add(inst)
    session.flush()
    audit(session, actor, Action.INSTRUMENT_ADD, entity_type="instrument", entity_id=inst.id,
          data={"serial": serial, "site": site, "range": [high, low], "resolution": resolution,
                "pathlength_um": pathlength_um})
    return inst


def get_instrument(session: Session, serial: str) -> Instrument:
    inst = session.exec(select(Instrument).where(Instrument.serial == serial)).first()
    if inst is None:
        raise NotFoundError(f"unknown instrument {serial!r}")
    return inst


def add_grade(session: Session, actor: Actor, code: str, *, name: str = "",
              family: str = "gasoline") -> Grade:
    authorize(actor, Action.GRADE_ADD)
    code = (code or "").strip()
    if not code:
        raise InputError("a grade needs a code", field="CODE")
    if family not in ("gasoline", "diesel", "jet", "other"):
        raise InputError(f"unknown fuel family {family!r}; use gasoline, diesel, jet or other",
                         field="--family")
    if session.exec(select(Grade).where(Grade.code == code)).first():
        raise InputError(f"grade {code!r} already exists", field="CODE")
    grade = Grade(code=code, name=name, family=family)
    session.add(grade)
    session.flush()
    audit(session, actor, Action.GRADE_ADD, entity_type="grade", entity_id=grade.id,
          data={"code": code, "name": name, "family": family})
    return grade


def get_grade(session: Session, code: str) -> Grade:
    grade = session.exec(select(Grade).where(Grade.code == code)).first()
    if grade is None:
        raise NotFoundError(f"unknown grade {code!r}")
    return grade


def get_property(session: Session, code: str) -> Property:
    prop = session.exec(select(Property).where(Property.code == code.upper())).first()
    if prop is None:
        raise NotFoundError(f"unknown property {code!r}")
    return prop


#: Instrument events that make the models in service on it due for revalidation.
INSTRUMENT_EVENT_KINDS = ("service", "repair", "requalification", "relocation")


def record_instrument_event(session: Session, actor: Actor, serial: str, kind: str,
                            note: str = "") -> InstrumentEvent:
    """Log a service/repair/requalification; it makes models on that instrument due."""
    authorize(actor, Action.INSTRUMENT_EVENT)
    if kind not in INSTRUMENT_EVENT_KINDS:
        raise InputError(f"unknown instrument event {kind!r}", field="KIND")
    inst = get_instrument(session, serial)
    ev = InstrumentEvent(instrument_id=inst.id, kind=kind, note=note, user_id=actor.id)
    session.add(ev)
    session.flush()
    audit(session, actor, Action.INSTRUMENT_EVENT, entity_type="instrument", entity_id=inst.id,
          data={"serial": serial, "kind": kind, "note": note, "event_id": ev.id})
    raise_service_triggers(session, inst, ev)
    return ev


def seed_catalog(session: Session) -> int:
    """Insert the catalog's properties and methods into an empty registry (system action)."""
    if session.exec(select(func.count()).select_from(Property)).one():
        return 0
    by_code = {}
    for p in catalog.PROPERTIES:
        row = Property(**p, source=catalog.PROPERTY_SOURCE)
        session.add(row)
        session.flush()
        by_code[row.code] = row
    for m in catalog.METHODS:
        m = dict(m)
        prop = by_code[m.pop("property")]
        session.add(ReferenceMethod(property_id=prop.id, **m))
    session.flush()
    audit(session, None, Action.CATALOG_SEED, entity_type="catalog",
          data={"properties": [p["code"] for p in catalog.PROPERTIES],
                "methods": [[m["code"], m["property"]] for m in catalog.METHODS]})
    return len(catalog.PROPERTIES)


def ensure_known(session: Session) -> None:
    """Raise a clear error when the database has no registry schema."""
    from ..storage.engine import current_revision, has_schema, head_revision

    bind = session.connection()
    if not has_schema(bind):
        raise RegistryError("this database has no registry schema: run 'specledger init' first")
    current, head = current_revision(bind), head_revision()
    if current != head:
        raise RegistryError(f"this database's schema is at revision {current}, this version of "
                            f"Specledger expects {head}: run 'specledger init' to upgrade it")
