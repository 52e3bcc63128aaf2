"""Optional login, configured only through Streamlit secrets (never in the plant config).

- ``[auth]`` in ``.streamlit/secrets.toml`` → OpenID Connect via ``st.login`` (needs Authlib).
- ``[leakfleet] password_sha256 = "<hex>"`` → one shared password, compared in constant time.
- Neither → no login (the default: the dashboard listens on 127.0.0.1 only).
See dashboard/README.md for the set-up.
"""

from __future__ import annotations

import hashlib
import hmac
from typing import Any

import streamlit as st

__all__ = ["gate"]


def _secrets() -> dict[str, Any]:
    try:
        return {k: st.secrets[k] for k in st.secrets}
    except FileNotFoundError:  # no secrets.toml at all: no login configured
        return {}


def _password_ok(given: str, expected_hex: str) -> bool:
    digest = hashlib.sha256(given.encode("utf-8")).hexdigest()
    return hmac.compare_digest(digest, expected_hex.strip().lower())


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
    expected = (secrets.get("leakfleet") or {}).get("password_sha256")
    if not expected or st.session_state.get("lf_signed_in"):
        return
    st.header("leakfleet")
    with st.form("lf_password_form"):
        given = st.text_input("Password", type="password", key="lf_password")
        submitted = st.form_submit_button("Sign in")
    if submitted and _password_ok(given, str(expected)):
        st.session_state["lf_signed_in"] = True
        st.session_state.pop("lf_password", None)
        st.rerun()
    if submitted:
        st.error("Wrong password.")
    st.stop()
