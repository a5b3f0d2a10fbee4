"""`import loopzoo` (and its task registry) stays torch + numpy only: the open-data loaders and
baselines import statsmodels / scikit-learn / pandas lazily."""

import subprocess
import sys

HEAVY = ("statsmodels", "sklearn", "pandas", "scipy", "lightning", "hydra", "matplotlib")


def test_task_registry_imports_no_heavy_package():
    code = (
        "import sys, loopzoo, loopzoo.tasks\n"
        "names = loopzoo.tasks.available()\n"
        "task = loopzoo.tasks.create('adding', length=10, train_size=5, val_size=5, test_size=5)\n"
        "task.baselines(); task.describe()\n"
        f"print(sorted({{m.split('.')[0] for m in sys.modules}} & set({HEAVY!r})))\n"
    )
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            check=True, timeout=120)
    assert result.stdout.strip() == "[]", result.stdout
