"""Stage 1, read: EDF/EDF+ decoding, channel profiles, and an EDF+ writer.

``read_recording(path, profile=None)`` reads a file and assigns its channels to roles;
``write_edf(...)`` writes EDF/EDF+C/EDF+D (for the synthetic generator and tests);
``load_profile(name_or_path)`` loads a channel profile from ``rules/profiles/`` or a path.
"""

from hsat.io._edf import EdfFile, read_edf
from hsat.io._edf_write import write_edf
from hsat.io._profiles import Profile, RoleSpec, builtin_profile_names, load_profile
from hsat.io._read import read_recording

__all__ = [
    "EdfFile",
    "Profile",
    "RoleSpec",
    "builtin_profile_names",
    "load_profile",
    "read_edf",
    "read_recording",
    "write_edf",
]
