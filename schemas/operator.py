"""Who did it: the name typed as operator, and beside it the account's login name.

The record keeps both, so a name typed by hand (or left out) can always be set against the account that ran
the command or the dashboard.
"""

from __future__ import annotations

import getpass
import os

from fieldslope.common.errors import RecordError


def login_name() -> str:
    """The account's login name, never blank: ``getpass.getuser()`` (the LOGNAME, USER, LNAME and USERNAME
    variables, then the password database), else the password database alone, else ``uid N``."""
    try:
        name = getpass.getuser()
    except Exception:  # noqa: BLE001 - no such variable and no password entry (some containers)
        name = ""
    if not name.strip():                        # a variable set to blanks
        try:
            import pwd

            name = pwd.getpwuid(os.getuid()).pw_name
        except Exception:  # noqa: BLE001 - no pwd module (Windows) or no entry for this uid
            name = ""
    if not name.strip():
        uid = getattr(os, "getuid", None)
        name = f"uid {uid()}" if uid else "unknown account"
    return name


def who(operator: str | None) -> tuple[str, str]:
    """(operator, login) to record: the name typed (refused when blank) or else the login name."""
    login = login_name()
    if operator is None:
        return login, login
    if not str(operator).strip():
        raise RecordError("the operator name is blank; give your name, or leave it out to record your login name.")
    return str(operator), login


def by_text(operator: str, login: str) -> str:
    """'ana', or 'Ana Ruiz (login ana)' when the name typed is not the login name."""
    return operator if not login or login == operator else f"{operator} (login {login})"

