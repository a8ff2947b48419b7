"""Who reviews: the name written with every journaled action and into the export's `reviewer` column.

The default is the login name (getpass.getuser: $LOGNAME, $USER, $LNAME, $USERNAME, then the password
database); when none can be found the actions carry no name rather than failing.
"""

from __future__ import annotations

import getpass

from reviewer.errors import BadInput

NAME_CHARS = 64  # longest name kept (common practice, no source: a login or a person's short name)


def login_name() -> str | None:
    """The login name, or None when the system cannot tell (no variable set, no passwd entry)."""
    try:
        name = getpass.getuser()
    except Exception:  # noqa: BLE001 -- OSError, KeyError, ImportError (no pwd module) alike
        return None
    name = (name or "").strip()
    return name[:NAME_CHARS] if name and name.isprintable() else None


def reviewer_name(text: str, what: str = "--reviewer") -> str:
    """A reviewer name given by the user: one printable line, 1 to NAME_CHARS characters."""
    name = (text or "").strip()
    if not name or not name.isprintable() or len(name) > NAME_CHARS:
        raise BadInput(f"{what} {text!r}: give a name of 1 to {NAME_CHARS} printable characters "
                       "on one line")
    return name
