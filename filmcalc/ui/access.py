"""An optional shared password in front of the whole dashboard.

Off unless the server has a password: the environment variable
``FILMCALC_PASSWORD`` or the key ``password`` in ``.streamlit/secrets.toml``.
Then every browser session must type it once before any page runs. It is a
shared lab password, not user accounts, and it travels as plain HTTP unless a
TLS proxy sits in front of the server (see the README).
"""

from __future__ import annotations

import hmac
import os

import streamlit as st
from streamlit.errors import StreamlitSecretNotFoundError

PASSWORD_ENV = "FILMCALC_PASSWORD"
_GRANTED = "access_granted"


def configured_password():
    """The shared password, or None when the dashboard is open to anyone who can reach it.

    The environment variable wins over the secrets file (set but empty, it
    is ignored). A secrets file that exists but cannot be read keeps the
    dashboard closed (:func:`secrets_problem` says why) rather than open.
    """
    password = os.environ.get(PASSWORD_ENV) or None
    if password is None:
        try:
            password = st.secrets.get("password")
        except StreamlitSecretNotFoundError:  # no secrets file (no password), or one that cannot be read
            password = None
    return str(password) if password else None


def secrets_problem():
    """Why the secrets file cannot be read, or None (also None when there is none, or the variable is set)."""
    if os.environ.get(PASSWORD_ENV):
        return None
    try:
        st.secrets.get("password")
    except StreamlitSecretNotFoundError as exc:
        if getattr(exc, "error_id", None) != "no-secrets-found":
            return str(exc)
    return None


def unlocked():
    """True when no password is set (and no unreadable secrets file) or this browser session has given it."""
    if secrets_problem():
        return False
    return configured_password() is None or bool(st.session_state.get(_GRANTED))


def ask_password():
    """Show the password box and stop the page until the right password is given.

    The comparison runs in constant time (``hmac.compare_digest``); success is
    remembered for this browser session only.
    """
    problem = secrets_problem()
    if problem:
        st.error(f"The dashboard stays closed: its secrets file cannot be read ({problem}). Fix or remove "
                 ".streamlit/secrets.toml, or set the password with the FILMCALC_PASSWORD environment variable.")
        st.stop()
    password = configured_password()
    st.title("filmcalc")
    st.write("This dashboard is shared on the lab network with a password. Type it to continue; "
             "ask whoever runs the server if you do not have it.")
    with st.form("access_form"):
        typed = st.text_input("Password", type="password", key="access_typed")
        sent = st.form_submit_button("Open the dashboard", type="primary")
    if sent and typed:
        if hmac.compare_digest(typed.encode("utf-8"), password.encode("utf-8")):
            st.session_state[_GRANTED] = True
            st.rerun()  # the typed password is dropped with the form, which is not drawn again
        st.error("That is not the password. Check it (passwords are case-sensitive) and try again.")
    elif sent:
        st.error("Type the password first.")
    st.stop()
