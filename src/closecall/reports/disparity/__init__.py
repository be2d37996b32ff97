"""Human-versus-model disparity: how reviewers' overrides changed the gaps between groups.

The functions here take a table of effective reviews (one row per reviewed case; see
:data:`closecall.reports.disparity.table.REVIEW_COLUMNS`) and return typed results.
Nothing here prints, reads the ledger or touches files;
:mod:`closecall.reports.disparity.from_study` does the plumbing.
"""

from closecall.reports.disparity.report import DisparityReport, build_report

__all__ = ["DisparityReport", "build_report"]
