"""bivocab: controlled, measured and reproducible vocabularies for bilingual language models.

>>> import bivocab
>>> sorted(bivocab.POLICIES)
['fully-tagged', 'shared', 'word-tagged']
"""

__version__ = "0.1.0"

from .audit import AuditResult, audit_build, run_audit  # noqa: E402
from .build import BuildResult, build  # noqa: E402
from .errors import BivocabError, CheckFailed, InputError, OutputError, RecipeError  # noqa: E402
from .recipe import POLICIES, Recipe, load_recipe  # noqa: E402
from .segment import segment, token_class  # noqa: E402
from .shards import ShardReader, open_shards, torch_dataset  # noqa: E402

__all__ = [
    "AuditResult", "audit_build", "run_audit",
    "BivocabError", "BuildResult", "CheckFailed", "InputError", "OutputError", "POLICIES", "Recipe",
    "RecipeError", "ShardReader", "__version__", "build", "load_recipe", "open_shards", "segment",
    "token_class", "torch_dataset",
]
