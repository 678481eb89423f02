"""Old home of `TenureLifeTable`, now in `lifecycle.models`.

Kept so that objects pickled when the class lived here (``lifecycle.evaluation._baseline``)
still load: unpickling looks the class up by this module path.
"""

from ..models import TenureLifeTable

__all__ = ["TenureLifeTable"]
