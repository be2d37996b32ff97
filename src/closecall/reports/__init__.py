"""Reports over the ledger: export and the disparity report."""
