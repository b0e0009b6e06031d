"""Sentences every surface shows in the same words."""

# The caution every report, printout and command output carries: valuation can hurt people,
# and a regression estimate is not an opinion of value.
CAUTION = ("A statistical estimate, not an appraisal: the licensed appraiser's judgement, "
           "professional standards such as USPAP and local rules govern.")
