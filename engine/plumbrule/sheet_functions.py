"""The worksheet functions, at the module path written in users' xlwings.conf sheets.

The code lives in :mod:`plumbrule.excel.functions`; this module only re-exports it so that
xlwings' Import Functions, pointed at ``plumbrule.sheet_functions``, finds every PLUMB_ function.
"""

from plumbrule.excel.functions import *  # noqa: F401,F403
