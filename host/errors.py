"""The one exception tree of dcrig. Owns error types only; imports nothing of the project.

Every error a user can cause is a DcrigError; the CLI prints `error: <message>` and exits 2.
Library errors are wrapped with `raise ... from err` so the cause stays in --debug output.
"""


class DcrigError(Exception):
    """Base of every error dcrig raises on purpose."""


class ConfigError(DcrigError):
    """A config file or command-line value breaks a rule. Message: 'FILE: KEY: rule'."""


class LinkError(DcrigError):
    """The serial link failed: port, framing, handshake or protocol."""


class LinkTimeout(LinkError):
    """No valid frame arrived before the deadline."""


class TripError(DcrigError):
    """A protection tripped where the caller asked to stop on trips."""


class ModelError(DcrigError):
    """The model reported a state it cannot continue from (non-finite values)."""
