"""Many workers: the long jobs spread over Ray actors on this machine (`--workers N`) or on a team's Ray
cluster (`--cluster ADDRESS`). `pool` starts workers and hands them jobs; `answer` answers a queue with the
run loop's pieces; `builds` builds several families at once, one per worker; `evals` runs the eval's
builds and tasks.

Ray is imported only inside these modules, and only when a command asks for workers: the run loop and the
builder work without it (`pip install 'jigwright[cluster]'` adds it)."""

from .answer import answer_on_workers
from .builds import build_on_workers
from .evals import eval_on_workers
from .pool import ClusterOptions, import_ray

__all__ = ["ClusterOptions", "answer_on_workers", "build_on_workers", "eval_on_workers", "import_ray"]
