"""All exception and warning classes of mlsites.

Every error the user can cause derives from :class:`MlsitesError`; the command line
turns any of them into one line on stderr and exit status 2. Specific errors also
inherit a built-in so callers can catch either.
"""


class MlsitesError(Exception):
    """Root of all errors the user can act on."""


class InputError(MlsitesError, ValueError):
    """A file, field, row or option is invalid (says which and what to do)."""


class RasterReadError(MlsitesError, OSError):
    """A raster could not be opened or read."""


class VectorReadError(MlsitesError, OSError):
    """A vector layer or table could not be opened or read."""


class GridMismatchError(MlsitesError, ValueError):
    """CRS, transform or shape of two grids differ where they must match."""


class CRSError(MlsitesError, ValueError):
    """A coordinate reference system is missing or unusable for the job."""


class InsufficientDataError(MlsitesError, ValueError):
    """Too few sites, cells or samples for what was asked."""


class ConfigError(MlsitesError, ValueError):
    """An experiment file is malformed or inconsistent."""


class OutputExistsError(MlsitesError, FileExistsError):
    """An output already exists and overwriting was not asked for."""


class EdgeEffectWarning(UserWarning):
    """A result near the raster edge or nodata uses a partial neighbourhood."""


class DataQualityWarning(UserWarning):
    """Input records were dropped or changed; the run continues."""


class MlsitesDeprecationWarning(FutureWarning):
    """Deprecated, will be removed; the message says what to use instead."""
