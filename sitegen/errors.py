"""The one exception hierarchy of sitegen.

Every problem sitegen knows how to explain is one of these; anything else is a
bug. Third-party exceptions are translated at one boundary per library and
chained (``raise ... from exc``). Only the CLI turns them into messages and
exit codes.

::

    SitegenError                     base: a problem sitegen can explain
    ├── ConfigError                  site-wide settings or command line; nothing is written (exit 2)
    │   ├── SiteConfigError          site.toml is unreadable or invalid
    │   ├── OutputFolderError        the output folder is unsafe to write into
    │   │   └── BuildLockedError     another build holds the output folder's lock
    │   └── ClusterError             the cluster named by --cluster cannot be reached or cannot see the folders
    ├── DatasetError                 one dataset cannot be fitted; the others go on
    │   ├── SidecarError             NAME.toml is unreadable or invalid
    │   ├── DataFileError            NAME.csv cannot be read as a table
    │   ├── DataLimitError           NAME.csv is over a configured size, row or column limit
    │   ├── FormulaError             the model formula is invalid or names missing columns
    │   │   └── WholeFileFormulaError  its terms need every row at once (a file read in chunks cannot have them)
    │   └── FitError                 the data do not support the model (too few rows, singular design, …)
    ├── PackError                    a site cannot be packed into a zip or single file
    └── OutsideFolderError           a file leads outside the folder it must stay in (confine.py); callers
                                     re-raise it as their own kind (a dataset's, site.toml's, a theme's)
"""

from __future__ import annotations

#: The words of a dataset's error message when sitegen itself failed (a bug, not the data).
#: Such results are never reused by a rebuild: the next build tries again and shows the traceback.
INTERNAL_ERROR_WORDS = "because of an internal error"


class SitegenError(Exception):
    """A problem sitegen can explain to its user."""

    def __init__(self, message: str, *, hint: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.hint = hint

    def __str__(self) -> str:
        if self.hint:
            return f"{self.message} ({self.hint})"
        return self.message


class ConfigError(SitegenError):
    """Site-wide settings or command-line arguments are invalid; nothing is written."""


class SiteConfigError(ConfigError):
    """site.toml cannot be read or holds invalid settings."""


class OutputFolderError(ConfigError):
    """The output folder cannot safely be written to."""


class BuildLockedError(OutputFolderError):
    """Another build is writing the same output folder."""


class ClusterError(ConfigError):
    """The Dask cluster named by ``--cluster`` cannot be reached, or a worker cannot do the build's work (it
    cannot see the data folder or the output's parent, or runs other versions); nothing is published."""


class DatasetError(SitegenError):
    """One dataset cannot be fitted; the build goes on with the others."""


class SidecarError(DatasetError):
    """A dataset's TOML sidecar cannot be read or holds invalid settings."""


class SidecarUnreadableError(SidecarError):
    """A dataset's sidecar could not be read at all (the system refused or lost it): that says nothing about
    its settings, so the build tries the dataset again and never keeps the failure as the dataset's state."""


class DataFileError(DatasetError):
    """A dataset's CSV file cannot be read as a table of numbers."""


class DataLimitError(DatasetError):
    """A dataset's CSV file exceeds a configured size, row or column limit."""


class FormulaError(DatasetError):
    """The model formula is malformed, unsafe, or names columns the data lack."""


class WholeFileFormulaError(FormulaError):
    """The model formula has terms that need every row at once (categorical or centred), which a file read in
    chunks cannot have."""


class FitError(DatasetError):
    """The data cannot support the requested model."""


class PackError(SitegenError):
    """A built site cannot be packed for sending."""


class OutsideFolderError(SitegenError):
    """A file leads outside the folder it must stay in (a link, a path to elsewhere), or is not a plain file."""
