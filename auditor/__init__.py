"""Power factor audit service: interval-meter data and bills in, reactive charges and a
costed, safety-screened correction case out."""

__version__ = "0.1.0"

#: the folder name of the per-user data, log and cache directories (platformdirs)
APP_DIR_NAME = "pf-auditor"
