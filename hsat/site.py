"""Site settings: the clinic that issues the report (printed in the report header).

A small TOML file; unknown keys are an error naming the file and the key::

    [clinic]
    name = "Example Sleep Clinic"                  # required
    address = ["12 Example Road", "Exampleton"]    # address lines, at least one
    phone = "+00 000 000 000"                      # required
    fax = "+00 000 000 001"                        # optional
    email = "sleep@clinic.invalid"                 # optional

``load_site(None)`` gives ``Site.unset()``: the report then says that no site settings
were given instead of printing a blank header.
"""

from __future__ import annotations

from pathlib import Path

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from hsat.errors import ConfigError
from hsat.rulesets import describe_validation_error, read_toml


class Site(BaseModel):
    """The clinic shown in the report header."""

    model_config = ConfigDict(extra="forbid", frozen=True, str_strip_whitespace=True)

    name: str = Field(min_length=1, max_length=120)
    address: tuple[str, ...] = Field(min_length=1, max_length=6)
    phone: str = Field(min_length=1, max_length=60)
    fax: str | None = Field(None, max_length=60)
    email: str | None = Field(None, max_length=120)
    source_path: str = ""

    @classmethod
    def unset(cls) -> Site:
        """The placeholder header used when no site file was given (says so visibly)."""
        return cls(
            name="Clinic not configured", address=("no site settings file was given",),
            phone="not recorded",
        )

    @property
    def is_unset(self) -> bool:
        return not self.source_path

    def contact_line(self) -> str:
        """``Tel ... · Fax ...`` (the e-mail address goes on its own line)."""
        parts = [f"Tel {self.phone}"]
        if self.fax:
            parts.append(f"Fax {self.fax}")
        return "  \u00b7  ".join(parts)


class _SiteFile(BaseModel):
    model_config = ConfigDict(extra="forbid")
    clinic: Site


def load_site(path: str | Path | None) -> Site:
    """Read the site settings file (``Site.unset()`` when ``path`` is None).

    Raises
    ------
    ConfigError
        Missing or unreadable file, not TOML, no ``[clinic]`` table, an unknown key or
        a missing required one (name, address, phone).
    """
    if path is None:
        return Site.unset()
    p = Path(path)
    _, data = read_toml(p, "site settings")
    try:
        if isinstance(data.get("clinic"), dict) and "source_path" in data["clinic"]:
            raise ConfigError(p, "key 'clinic.source_path': unknown key")
        return _SiteFile.model_validate(data).clinic.model_copy(update={"source_path": str(p)})
    except ValidationError as exc:
        raise ConfigError(p, describe_validation_error("site settings", exc)) from None
