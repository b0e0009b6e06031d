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


# Thresholds that are rules of thumb read so on the Report; their source note stays on the
# Model sheet and in docs/methods.md.
RULE_OF_THUMB = "a rule of thumb"


def in_words(text: str) -> str:
    """A threshold's text for a reader: '(common practice, no source)' and its variants said
    as 'a rule of thumb'; the note of where a source was recalled from left to the Model
    sheet."""
    import re
    text = re.sub(r"\(\s*common practice, no source\s*\)", f"({RULE_OF_THUMB})", str(text))
    text = re.sub(r";\s*common practice, no source", f"; {RULE_OF_THUMB}", text)
    text = text.replace("; from memory", "")
    return text.replace("common practice, no source", RULE_OF_THUMB)


def gap_warning(rec) -> bool:
    """Whether a reconciled record (comparables.with_gap) says the two values disagree."""
    v = rec.get("gap_warning") if hasattr(rec, "get") else None
    return bool(v) and v == v


def gap_sentence(rec) -> str:
    """The reconciled value and the model's estimate disagree: by how much, against which
    limit, and the comparables' largest adjustments as the likely cause."""
    from plumbrule.numbers import money
    gap, pct = float(rec["gap"]), float(rec["gap_pct"])
    side = "below" if gap < 0 else "above"
    text = (f"the comparables' value {money(rec['value'])} is {money(abs(gap))} "
            f"({100 * abs(pct):.1f}%) {side} the model's estimate {money(rec['model_estimate'])}, "
            f"more than the {money(rec['gap_limit'])} the settings allow (the smaller of "
            "reconcile_gap and half the prediction interval)")
    cause = rec.get("largest_adjustments")
    if isinstance(cause, str) and cause:
        text += f"; the likely cause is among the largest adjustments: {cause}"
    return text
