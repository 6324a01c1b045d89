"""Fulcrum's pure core: choose and defend a decision threshold for a rare event.

Usable from a notebook in the scikit-learn style::

    from core import sweep
    curve = sweep(y_true, y_score)
    curve.at(0.31).metrics["recall"]

No Streamlit import lives anywhere under ``core``.
"""

from core.curve import Curve, OperatingPoint, sweep
from core.errors import InputError
from core.metrics import METRIC_NAMES, confusion_metrics

__version__ = "0.1.0"

__all__ = ["Curve", "OperatingPoint", "sweep", "InputError", "METRIC_NAMES", "confusion_metrics",
           "__version__"]

from core.dataset import Dataset, IntakeWarning, Mapping  # noqa: E402

__all__ += ["Dataset", "IntakeWarning", "Mapping"]

from core.choose import Choice, PointReport, RuleCheck, choose, cost_by_threshold, evaluate  # noqa: E402
from core.policy import (  # noqa: E402
           Costs,
           Deployment,
           Fairness,
           Objective,
           Policy,
           PolicyError,
           Rules,
           dumps_policy,
           load_policy,
           loads_policy,
           resolve_policy,
           save_policy,
)

__all__ += ["Choice", "PointReport", "RuleCheck", "choose", "cost_by_threshold", "evaluate", "Costs",
            "Deployment", "Fairness", "Objective", "Policy", "PolicyError", "Rules", "dumps_policy",
            "load_policy", "loads_policy", "resolve_policy", "save_policy"]

from core.intake import (  # noqa: E402
           DEMOS,
           label_values,
           load_count_table,
           load_dataset,
           load_demo,
           suggest_mapping,
)
from core.reading import RawTable, ReadInfo, read_table  # noqa: E402

__all__ += ["DEMOS", "label_values", "load_count_table", "load_dataset", "load_demo", "suggest_mapping",
            "RawTable", "ReadInfo", "read_table"]

from core.bootstrap import (  # noqa: E402
           DESIGNS,
           BootstrapResult,
           EventCells,
           bootstrap,
           bootstrap_counts,
           event_cells,
           percentile_interval,
)
from core.optimism import (  # noqa: E402
           CrossFit,
           HarrellCorrection,
           Optimism,
           cross_fit,
           harrell_correction,
           optimism,
)
from core.stability import ThresholdStability, threshold_stability  # noqa: E402
from core.uncertainty import (  # noqa: E402
           Evidence,
           Interval,
           bootstrap_intervals,
           curve_intervals,
           events_for_recall_half_width,
           evidence,
           few_events_statement,
           point_intervals,
)

__all__ += ["DESIGNS", "BootstrapResult", "EventCells", "bootstrap", "bootstrap_counts", "event_cells",
            "percentile_interval", "CrossFit", "HarrellCorrection", "Optimism", "cross_fit",
            "harrell_correction", "optimism", "ThresholdStability", "threshold_stability", "Evidence",
            "Interval", "bootstrap_intervals", "curve_intervals", "events_for_recall_half_width",
            "evidence", "few_events_statement", "point_intervals"]

from core.calibration import CalibrationReport, calibration_report  # noqa: E402
from core.clusters import ClusterSummary, cluster_bootstrap, cluster_summary  # noqa: E402
from core.groups import SubgroupReport, fairness_verdict, subgroup_report  # noqa: E402

__all__ += ["CalibrationReport", "calibration_report", "ClusterSummary", "cluster_bootstrap",
            "cluster_summary", "SubgroupReport", "fairness_verdict", "subgroup_report"]

from core.decision import Analysis, analyse, decide  # noqa: E402
from core.memo_fields import (  # noqa: E402
           MemoFieldsError,
           check_memo_fields,
           dumps_memo_fields,
           load_memo_fields,
           loads_memo_fields,
           save_memo_fields,
)
from core.record import (  # noqa: E402
           SCHEMA,
           RecordError,
           check_record,
           dumps_record,
           fingerprint_note,
           load_record,
           loads_record,
           restore_decision,
           without_timestamps,
           write_record,
)

__all__ += ["Analysis", "analyse", "decide", "MemoFieldsError", "check_memo_fields", "dumps_memo_fields",
            "load_memo_fields", "loads_memo_fields", "save_memo_fields", "SCHEMA", "RecordError",
            "check_record", "dumps_record", "fingerprint_note", "load_record", "loads_record",
            "restore_decision", "without_timestamps", "write_record"]

from core.compare import Comparison, compare_dataset, compare_scores  # noqa: E402
from core.recheck import RecheckResult, recheck  # noqa: E402
from core.reduce import reduce_file  # noqa: E402
from core.sql import reduction_sql  # noqa: E402

__all__ += ["Comparison", "compare_dataset", "compare_scores", "RecheckResult", "recheck", "reduce_file",
            "reduction_sql"]

from core.compare import compare_mapped  # noqa: E402
from core.compare_record import build_compare_document, check_compare_document  # noqa: E402
from core.intake import mapped_columns  # noqa: E402
from core.recheck import build_recheck_record, policy_changes, rechoose  # noqa: E402
from core.reduce import Reduction, reduction_of  # noqa: E402
from core.signing import Verification, sign_record, verify_record  # noqa: E402

__all__ += ["compare_mapped", "build_compare_document", "check_compare_document", "mapped_columns",
            "build_recheck_record", "policy_changes", "rechoose", "Reduction", "reduction_of",
            "Verification", "sign_record", "verify_record"]
