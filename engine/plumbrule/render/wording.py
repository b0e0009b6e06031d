"""Sentences every surface shows in the same words."""

# The caution every report, printout and command output carries: valuation can hurt people,
# and a regression estimate is not an opinion of value.
CAUTION = ("A statistical estimate, not an appraisal: the licensed appraiser's judgement, "
           "professional standards such as USPAP and local rules govern.")


def _count(fit, key: str, default: int = 0) -> int:
    try:
        return int(fit[key])
    except (KeyError, TypeError, ValueError):
        return default


def final_fit_text(fit) -> str:
    """Which sales the model that values was fitted on, from the ``fit`` record: 'Model
    fitted on all N screened sales …' or 'Model fitted on the N training sales …'."""
    n, hold = _count(fit, "n_used"), _count(fit, "n_holdout")
    train = _count(fit, "n_training", n)
    if not hold:
        return f"Model fitted on all {n:,} screened sales"
    if str(fit.get("final_fit", "all")) == "all":
        return (f"Model fitted on all {n:,} screened sales: the {train:,} training sales and "
                f"the {hold:,} held-out sales, refitted together after validation")
    return (f"Model fitted on the {train:,} training sales (final_fit = training): the "
            f"{hold:,} held-out sales test it and are not in the fit")


def validation_text(fit) -> str:
    """What the validation figures measure, from the ``fit`` record."""
    n = _count(fit, "n_used")
    train = _count(fit, "n_training", n)
    if not _count(fit, "n_holdout"):
        return f"Accuracy of the model fitted on the {train:,} training sales"
    text = f"Held-out accuracy of the model fitted on the {train:,} training sales"
    if str(fit.get("final_fit", "all")) == "all":
        text += (f"; the values come from the model refitted on all {n:,} screened sales "
                 "after this test (final_fit = all)")
    return text
