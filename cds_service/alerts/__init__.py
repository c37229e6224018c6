"""Alert burden: per-finding settings, silent mode and repeat suppression (see policy.py)."""
