"""Which configuration an estimate was computed with: a short content hash.

An estimate depends on its batch's data, the recipe's kinetics (their own version,
the kinetics file's content hash) and the configuration around them: the recipe's
table (target, assays, plan, safety data), the unit's table (tags, temperature unit
and limits) and ``[estimator]``. `config_version` hashes the last three, so a changed
configuration is seen as a change of what an estimate means, like changed kinetics.
The kinetics file's *path* is left out: moving a file changes nothing its content says.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json

from .tables import Config


def config_version(cfg: Config, recipe: str, unit: str) -> str:
    """12 hex digits naming what ``cfg`` says about estimates of ``recipe`` on ``unit``.

    Absent tables count as absent (``null``), so a recipe or unit configured later
    changes the version too.
    """
    rc, u = cfg.recipe(recipe), cfg.unit(unit)
    doc = {
        "recipe": rc.model_dump(mode="json", exclude={"kinetics"}) if rc is not None else None,
        "unit": u.model_dump(mode="json") if u is not None else None,
        "estimator": dataclasses.asdict(cfg.estimator),
    }
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()[:12]
