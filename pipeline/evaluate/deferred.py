"""scikit-learn's metric functions, imported when one is first called: the metric tables are read when a
config is (their names), and `penduel validate` should not load scikit-learn."""
from __future__ import annotations


class DeferredMetrics:
    """`skm.name(...)` calls sklearn.metrics.name, importing scikit-learn on the first call."""

    def __getattr__(self, name):
        def call(*args, **kwargs):
            from sklearn import metrics
            return getattr(metrics, name)(*args, **kwargs)
        call.__name__ = name
        return call


skm = DeferredMetrics()
