"""Model families: one subpackage per family (sparse, ridge) behind one interface (interface.py),
listed once in families.py; estimators.py wraps the same interface for scikit-learn users."""
