"""fewshot: nested training subsets, a run ledger and honest statistics for few-shot studies.

The public API is re-exported here; see ``DESIGN.md`` for the words it uses.
"""

__version__ = "0.1.0"

from fewshot.errors import (  # noqa: E402
    DrawError,
    FewshotError,
    InvalidInput,
    InvalidName,
    ManifestError,
    PoolError,
)
from fewshot.manifest import (  # noqa: E402
    Manifest,
    Verification,
    load_manifest,
    pool_matches,
    verify_subset,
    write_draw,
)
from fewshot.pools import Pool, read_pool  # noqa: E402
from fewshot.sampling import (  # noqa: E402
    RULE_VERSION,
    HashedIds,
    NestedDraw,
    draw_nested,
    exclude_ids,
    keep_top,
    subset_digest,
)
from fewshot.taskdraw import DrawSpec, Lineage, TaskDraw, draw_task  # noqa: E402

__all__ = [
    "__version__",
    "RULE_VERSION",
    "DrawError",
    "DrawSpec",
    "FewshotError",
    "HashedIds",
    "InvalidInput",
    "InvalidName",
    "Lineage",
    "Manifest",
    "ManifestError",
    "NestedDraw",
    "Pool",
    "PoolError",
    "TaskDraw",
    "Verification",
    "draw_nested",
    "draw_task",
    "exclude_ids",
    "keep_top",
    "load_manifest",
    "pool_matches",
    "read_pool",
    "subset_digest",
    "verify_subset",
    "write_draw",
]
