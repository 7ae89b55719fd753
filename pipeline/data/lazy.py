"""pandas on first use: reading a config (`penduel validate`) imports the data package, and a scenario or
bundled source never needs pandas, whose import costs about half a second."""
from __future__ import annotations


class LazyPandas:
    def __getattr__(self, name):
        import pandas

        return getattr(pandas, name)


pd = LazyPandas()
