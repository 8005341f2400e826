"""Saving and loading scoring models with skops and an explicit trusted-types list.

Never pickle or joblib: a model file is a zip of JSON plus numpy arrays, and only
the types named in :data:`TRUSTED_TYPES` (beyond skops' own safe defaults) may be
constructed when loading. Anything else, a corrupt file, or a file written by a newer
morpho model format is refused before a single object is built.
"""

from __future__ import annotations

import json
import os
import tempfile
import zipfile
from importlib import resources
from pathlib import Path

from ..errors import ModelFileError, OutputError, OutputExistsError

__all__ = [
    "FORMAT",
    "FORMAT_VERSION",
    "TRUSTED_TYPES",
    "DEFAULT_MODEL_NAME",
    "save_model",
    "load_model",
    "default_model_path",
]

FORMAT = "morpho-impact-spot-model"
FORMAT_VERSION = 1
DEFAULT_MODEL_NAME = "impact_spot_v1"

#: Types a morpho model file may hold beyond skops' built-in safe set. Audited by hand:
#: our estimator, and the scikit-learn pieces it is made of.
TRUSTED_TYPES = [
    "morpho.scoring._estimator.ImpactSpotClassifier",
    "sklearn.calibration._CalibratedClassifier",
    "sklearn.calibration._SigmoidCalibration",
    "sklearn.isotonic.IsotonicRegression",
    "sklearn.ensemble._hist_gradient_boosting.predictor.TreePredictor",
    "sklearn.model_selection._split.StratifiedKFold",
]

_FIX_TRUST = (
    "only load model files from sources you trust; rebuild the model with `morpho train` "
    "or use the shipped default."
)


def _sio():
    # Imported lazily: skops is only needed when a model is read or written.
    import skops.io as sio

    return sio


def save_model(model, path, card=None, *, overwrite=False):
    """Write ``model`` (and its model card) to ``path`` with skops, atomically.

    Parameters
    ----------
    model : ImpactSpotClassifier
        A fitted model.
    path : str or Path
        Target file, conventionally ``models/<name>.skops``.
    card : dict, optional
        Model card (JSON-serialisable); stored inside the file and written beside it
        as ``<name>.card.json`` and ``<name>.card.md`` (see :mod:`morpho.scoring._card`).
    overwrite : bool
        Replace existing files.

    Returns
    -------
    Path
    """
    from ._card import write_card
    from ._estimator import ImpactSpotClassifier

    path = Path(path)
    if not isinstance(model, ImpactSpotClassifier) or not hasattr(model, "classes_"):
        raise OutputError("only a fitted ImpactSpotClassifier can be saved.", path=path,
                          fix="fit the model first (morpho.scoring.train_model).")
    if path.exists() and not overwrite:
        raise OutputExistsError("the model file exists.", path=path, fix="pass overwrite=True (--overwrite).")
    card = {} if card is None else json.loads(json.dumps(card, default=str))
    from .. import __version__

    payload = {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "morpho_version": __version__,
        "model": model,
        "card": card,
    }
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=path.name, suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        # Deflate: the trees and reference arrays compress to about a third.
        _sio().dump(payload, tmp, compression=zipfile.ZIP_DEFLATED, compresslevel=9)
        os.chmod(tmp, 0o644)  # mkstemp makes it private; a model is meant to be shared
        os.replace(tmp, path)
    except Exception as err:
        Path(tmp).unlink(missing_ok=True)
        raise OutputError(f"cannot write the model file ({err}).", path=path,
                          fix="check the folder is writable.") from err
    if card:
        write_card(card, path)
    return path


def load_model(path, *, with_card=False):
    """Load a model written by :func:`save_model`.

    Parameters
    ----------
    path : str or Path
    with_card : bool
        Also return the model card stored in the file.

    Returns
    -------
    ImpactSpotClassifier, or (ImpactSpotClassifier, dict) with ``with_card``.

    Raises
    ------
    ModelFileError
        Missing or corrupt file, untrusted types, not a morpho model, or written by a
        newer model format / skops protocol. Nothing is loaded in these cases.
    """
    from ._estimator import ImpactSpotClassifier

    path = Path(path)
    if not path.is_file():
        raise ModelFileError("no model file here.", path=path,
                             fix="give the path of a .skops model (default: morpho.scoring.default_model_path()).")
    sio = _sio()
    from skops.io.exceptions import UntrustedTypesFoundException

    try:
        # skops audits the whole tree against the list before it builds anything, so one
        # pass both refuses untrusted types and loads (a separate get_untrusted_types pass
        # walked the tree twice: ~0.35 s of a 0.9 s load).
        payload = sio.load(path, trusted=TRUSTED_TYPES)
    except UntrustedTypesFoundException as err:
        refused = sorted(set(sio.get_untrusted_types(file=path)) - set(TRUSTED_TYPES))
        raise ModelFileError(f"the model file holds untrusted types {refused}; nothing was loaded.",
                             path=path, fix=_FIX_TRUST) from err
    except (zipfile.BadZipFile, KeyError, json.JSONDecodeError) as err:
        raise ModelFileError(f"the model file is corrupt or not a skops file ({err}).", path=path,
                             fix="rebuild it with `morpho train` or reinstall morpho.") from err
    except Exception as err:  # skops raises many types for damaged content; all mean "corrupt"
        newer = "protocol" in str(err)
        what = "was written by a newer skops protocol" if newer else "is corrupt"
        raise ModelFileError(f"the model file {what} ({err}); nothing was loaded.", path=path,
                             fix="upgrade morpho/skops, or rebuild the model with `morpho train`.") from err
    if not isinstance(payload, dict) or payload.get("format") != FORMAT:
        raise ModelFileError("not a morpho scoring model file.", path=path,
                             fix="give a file written by morpho.scoring.save_model / `morpho train`.")
    version = payload.get("format_version")
    if not isinstance(version, int) or version > FORMAT_VERSION:
        raise ModelFileError(
            f"the model file has format version {version!r}; this morpho reads up to {FORMAT_VERSION}.",
            path=path, fix="upgrade morpho, or rebuild the model with this version (`morpho train`).")
    model = payload.get("model")
    if not isinstance(model, ImpactSpotClassifier):
        raise ModelFileError("the model file does not hold an ImpactSpotClassifier.", path=path,
                             fix="rebuild it with `morpho train`.")
    if with_card:
        return model, dict(payload.get("card") or {})
    return model


def default_model_path(name: str = DEFAULT_MODEL_NAME) -> Path:
    """Path of the shipped default model.

    Lookup order: (1) package data ``morpho/scoring/models/<name>.skops`` (present in
    editable and non-editable installs); (2) ``models/<name>.skops`` in the source
    checkout (a link to the package copy). The model card is beside either.

    Raises
    ------
    ModelFileError
        Neither exists.
    """
    packaged = Path(str(resources.files("morpho.scoring").joinpath("models", f"{name}.skops")))
    if packaged.is_file():
        return packaged
    repo = Path(__file__).resolve().parents[2] / "models" / f"{name}.skops"
    if repo.is_file():
        return repo
    raise ModelFileError(f"the default model {name!r} is not installed.", path=packaged,
                         fix="reinstall morpho, or rebuild it with `morpho train` (see models/README).")
