"""Passwords (argon2id) and authentication."""

from __future__ import annotations

from argon2 import PasswordHasher
from argon2.exceptions import InvalidHashError, VerificationError, VerifyMismatchError
from sqlmodel import Session, select

from ..errors import AuthenticationError
from ..storage.models import User
from .context import Actor

_hasher = PasswordHasher()  # argon2id with the library's RFC 9106 low-memory defaults

MIN_PASSWORD_LENGTH = 8


def hash_password(password: str) -> str:
    return _hasher.hash(password)


def password_matches(password_hash: str, password: str) -> bool:
    try:
        return _hasher.verify(password_hash, password)
    except (VerifyMismatchError, VerificationError, InvalidHashError):
        return False


def actor_of(user: User) -> Actor:
    return Actor(id=user.id, name=user.name, roles=frozenset(user.roles))


def authenticate(session: Session, name: str, password: str) -> Actor:
    """The actor for ``name`` if the password is right and the user is active."""
    user = session.exec(select(User).where(User.name == name)).first()
    # One message for unknown user and wrong password: do not reveal which names exist.
    if user is None or not password_matches(user.password_hash, password or ""):
        raise AuthenticationError(f"authentication failed for user {name!r}")
    if not user.active:
        raise AuthenticationError(f"user {name!r} is deactivated")
    return actor_of(user)


def verify_signer(session: Session, actor: Actor, password: str) -> None:
    """Re-check the password of a signer (electronic signatures need it every time)."""
    user = session.get(User, actor.id)
    if user is None or not user.active or not password_matches(user.password_hash, password or ""):
        raise AuthenticationError(f"signature refused: password check failed for {actor.name!r}")
