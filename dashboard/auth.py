"""Optional login, configured only through Streamlit secrets (never in the plant config).

- ``[auth]`` in ``.streamlit/secrets.toml`` → OpenID Connect via ``st.login`` (needs Authlib).
- ``[leakfleet] password_hash = "$argon2id$..."`` → one shared password, stored as a salted,
  slow Argon2id hash (``leakfleet dashboard --hash-password`` makes one); after
  ``MAX_FAILURES`` wrong passwords within ``WINDOW_S`` every sign-in waits for the window to
  pass (one limit for the whole dashboard, so new browser sessions do not reset it).
- Neither → no login (the default: the dashboard listens on 127.0.0.1 only).
See dashboard/README.md for the set-up.
"""

from __future__ import annotations

import threading
import time
from typing import Any

import streamlit as st

__all__ = ["MAX_FAILURES", "WINDOW_S", "gate", "password_ok"]

MAX_FAILURES = 5
WINDOW_S = 60.0
_failures: list[float] = []
_lock = threading.Lock()


def _secrets() -> dict[str, Any]:
    try:
        return {k: st.secrets[k] for k in st.secrets}
    except FileNotFoundError:  # no secrets.toml at all: no login configured
        return {}


def _locked(now: float) -> bool:
    with _lock:
        _failures[:] = [t for t in _failures if now - t < WINDOW_S]
        return len(_failures) >= MAX_FAILURES


def password_ok(given: str, expected_hash: str, now: float | None = None) -> bool | None:
    """True/False for the password; None while too many recent failures lock sign-in."""
    from argon2 import PasswordHasher
    from argon2.exceptions import InvalidHashError, VerificationError

    now = time.monotonic() if now is None else now
    if _locked(now):
        return None
    ok: bool
    try:
        ok = bool(PasswordHasher().verify(expected_hash.strip(), given))
    except (VerificationError, InvalidHashError):
        ok = False
    if not ok:
        with _lock:
            _failures.append(now)
    return bool(ok)


def gate() -> None:
    """Stop the run unless the viewer is signed in (no-op when no login is configured)."""
    secrets = _secrets()
    if "auth" in secrets:
        if not st.user.is_logged_in:
            st.header("leakfleet")
            st.caption("Sign in to see the plant's data.")
            st.button("Sign in", on_click=st.login, key="lf_login")
            st.stop()
        with st.sidebar:
            who = st.user.get("name") or st.user.get("email") or "signed in"
            st.caption(f"Signed in: {who}")
            st.button("Sign out", on_click=st.logout, key="lf_logout")
        return
    section = secrets.get("leakfleet") or {}
    if "password_sha256" in section and "password_hash" not in section:
        st.error("The dashboard's password is set as an unsalted password_sha256, which is no "
                 "longer accepted: make a password_hash with 'leakfleet dashboard "
                 "--hash-password' and put it in .streamlit/secrets.toml.")
        st.stop()
    expected = section.get("password_hash")
    if not expected or st.session_state.get("lf_signed_in"):
        return
    st.header("leakfleet")
    with st.form("lf_password_form"):
        given = st.text_input("Password", type="password", key="lf_password")
        submitted = st.form_submit_button("Sign in")
    verdict = password_ok(given, str(expected)) if submitted else False
    if verdict:
        st.session_state["lf_signed_in"] = True
        st.session_state.pop("lf_password", None)
        st.rerun()
    if submitted and verdict is None:
        st.error(f"Too many wrong passwords: sign-in is paused for up to {WINDOW_S:.0f} s.")
    elif submitted:
        st.error("Wrong password.")
    st.stop()
