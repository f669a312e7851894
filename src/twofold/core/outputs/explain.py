"""Plain explanations of each result, for the window's "What does this mean?" help (offline, no statistics).

Each topic says what the figure is, how to read it, what counts as enough
(with its source, or "common practice" where it is a rule of thumb), and
what not to conclude from it.  Written for a reader without statistical
training; every rule of thumb is marked as one.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Topic:
    key: str
    title: str
    what: str
    read: str
    enough: str
    not_conclude: str

    def text(self) -> str:
        """The topic as four short paragraphs."""
        return (f"What it is. {self.what}\n\nHow to read it. {self.read}\n\nWhat counts as enough. {self.enough}"
                f"\n\nWhat not to conclude. {self.not_conclude}")


TOPICS = (
    Topic("overall", "The test of the model as a whole (G)",
          "It compares the model with the simplest possible one, which gives every patient the same risk (the "
          "overall event rate). G is twice the gain in log-likelihood: how much better the model's risks match "
          "what happened.",
          "A small p-value (below 0.05 by convention) says the predictors together carry information about the "
          "outcome beyond the overall rate. The degrees of freedom are the number of coefficients added.",
          "There is no size of G that is enough; with thousands of records even a weak model passes. Judge "
          "usefulness by discrimination and calibration instead.",
          "Passing this test does not make a model useful for individual patients, and it says nothing about "
          "which predictor matters or about cause."),
    Topic("nested", "The test against the model before (likelihood-ratio test of nested models)",
          "Each tick adds a model to the ladder. When one model contains every predictor of the other, the "
          "two can be compared by a likelihood-ratio test on the same records: G is twice the difference in "
          "their log-likelihoods.",
          "A small p-value says the added predictors improve the fit more than chance alone would easily "
          "explain. Twofold fits every model of the ladder on the same rows so the test stays valid.",
          "Below 0.05 is the usual convention; for several predictors tried one after another, expect some "
          "to pass by chance.",
          "A predictor that improves fit is associated with the outcome given the others; it is not thereby a "
          "cause, and dropping one that does not pass does not prove it has no effect."),
    Topic("wald", "Wald z and its p-value",
          "For each coefficient, the estimate divided by its standard error. Under the hypothesis that the "
          "coefficient is zero it behaves roughly like a standard normal number.",
          "Values beyond about 2 in either direction go with p-values below 0.05. For a predictor with several "
          "groups, read the test of all its groups together rather than each row.",
          "With few events, or very large odds ratios, the Wald test loses power (Hauck & Donner 1977); "
          "Twofold then marks the likelihood-ratio test as the one to report.",
          "A p-value above 0.05 is not evidence that the predictor has no effect; it may mean the data are "
          "too few to tell."),
    Topic("odds_ratio", "Odds ratios and their intervals",
          "How many times the odds of the event are multiplied for one unit more of a number, or for a group "
          "compared with the reference group, the other predictors held fixed.",
          "1 means no association; above 1 higher odds, below 1 lower. The 95% interval shows the values "
          "compatible with the data. The Wald interval assumes symmetry on the log scale; the "
          "profile-likelihood interval does not, and is the better one with few events or separation.",
          "An interval that is narrow enough for the decision at hand is enough; there is no fixed width.",
          "An odds ratio is not a risk ratio: when the event is common they differ a lot. For a predictor in "
          "an interaction or a curve, read the odds ratios at stated values instead of one coefficient."),
    Topic("auc", "Area under the ROC curve (c statistic)",
          "The chance that a randomly chosen patient with the event was given a higher risk than a randomly "
          "chosen patient without it.",
          "0.5 is a coin toss, 1 perfect separation. The interval (DeLong's method) shows its uncertainty.",
          "Common practice reads about 0.7 as acceptable and 0.8 as good, but what is enough depends on the "
          "decision the model supports.",
          "A high AUC does not mean the risks themselves are right (that is calibration), and on the records "
          "the model was fitted to it looks better than on new patients."),
    Topic("calibration", "Calibration",
          "Whether the predicted risks match the observed share of events: of 100 patients given 20%, about "
          "20 should have the event.",
          "On the calibration plot, points near the diagonal mean risks are right. The calibration slope is 1 "
          "and calibration-in-the-large 0 on the fitting records by construction; on new records or after "
          "bootstrap correction, a slope below 1 means predictions too extreme.",
          "A slope between about 0.9 and 1.1 is commonly read as good (common practice).",
          "Good calibration here does not promise good calibration at another site or time; check it on new "
          "records."),
    Topic("hosmer_lemeshow", "Hosmer-Lemeshow test",
          "It groups records by predicted risk (usually ten groups) and compares observed and expected events "
          "in each with a chi-square test.",
          "A small p-value suggests the risks do not match in some groups. Read it beside the calibration "
          "plot.",
          "It needs about 5 or more expected events and non-events in every group (common practice); Twofold "
          "says when that is not met.",
          "A large p-value does not prove the model is calibrated: the test has little power in small samples "
          "and flags trivial misfit in large ones."),
    Topic("events_per_coefficient", "Events per coefficient",
          "The number of patients in the rarer outcome group divided by the number of coefficients estimated "
          "(groups of a predictor count one each).",
          "The higher, the more stable the estimates.",
          "10 or more is a long-standing rule of thumb (Peduzzi et al. 1996; common practice); the sample-size "
          "check below is the better guide.",
          "Meeting the rule does not make a model valid; failing it warns that odds ratios may be exaggerated."),
    Topic("sample_size", "Minimum sample size (Riley et al. 2020)",
          "The number of records needed so that the model is not over-fitted, its overall risk is estimated "
          "precisely, and its apparent performance is close to what new patients would see.",
          "Twofold works it out from the number of coefficients, the event rate and the model's Cox-Snell "
          "R-squared (apparent, or corrected by the bootstrap when one was run).",
          "The records used should be at least the minimum shown (Riley et al. 2020, BMJ 368:m441).",
          "Having enough records does not correct bias in how they were collected."),
    Topic("cooks_distance", "Cook's distance (influential records)",
          "How much the estimates would move if one record were left out.",
          "The records with the largest distances are listed by row, so they can be checked in the source "
          "data for errors.",
          "Common practice looks closer at values above 4 divided by the number of records, or far above the "
          "rest.",
          "An influential record is not necessarily wrong; never delete a record only because it is "
          "influential."),
    Topic("variance_inflation", "Variance inflation",
          "How much a predictor's uncertainty is inflated because other predictors carry much the same "
          "information.",
          "1 means none; large values mean the predictor is largely predictable from the others.",
          "Values above 10 are commonly taken as a problem (common practice).",
          "High inflation does not bias the model's predictions; it makes individual odds ratios unsteady."),
    Topic("firth", "Firth's penalised fit",
          "A way of fitting that pulls estimates slightly towards zero, so that they stay finite when a group "
          "has only events or only non-events (separation) and are less biased in small samples (Firth 1993).",
          "Its tests are penalised likelihood-ratio tests and its intervals profile penalised-likelihood "
          "intervals; predicted risks use a corrected intercept (FLIC) so that they average to the event rate.",
          "Use it when Twofold reports separation, or when events are few (Heinze & Schemper 2002, Stat Med "
          "21:2409, propose it for separation).",
          "It does not create information the data lack: a separated group still says little about its true "
          "odds ratio."),
    Topic("spline", "Curved effects (splines)",
          "A restricted cubic spline lets the effect of a number bend, with straight ends, instead of forcing "
          "a straight line on the log-odds scale.",
          "Read the curve in the effect plot and the odds ratios between stated values; the test of the curve "
          "against a straight line says whether bending is needed.",
          "3 to 5 knots are usual (Harrell 2015); more knots need more events.",
          "The curve's coefficients have no meaning one by one."),
    Topic("bootstrap", "Bootstrap validation",
          "The model is refitted on many resamples of the records, and each refit is tested on the original "
          "records; the average loss estimates how much better the model looks on its own data than it will "
          "on new patients (optimism).",
          "Corrected figures (AUC, calibration slope, Brier score) are what to expect on similar new "
          "patients. A corrected slope below 1 means the predictions should be shrunk.",
          "200 or more resamples are usual (common practice).",
          "It does not replace a check on records from another time or site."),
    Topic("net_benefit", "Decision curve (net benefit)",
          "For each threshold risk at which one would act (treat, investigate, call the patient), net benefit counts "
          "the events caught minus the needless actions, weighted by how many needless actions one event is worth "
          "at that threshold, per person. It is drawn beside acting on everyone and acting on no one (0).",
          "Where the model's curve is above both others, acting on its risks does more good than either simple "
          "policy. Read it only over the thresholds clinicians would accept; a threshold of 10% means accepting "
          "nine needless actions to catch one event.",
          "There is no fixed size of net benefit that is enough; any amount above both simple policies is a gain "
          "(Vickers & Elkin 2006). With a bootstrap, read the curve corrected for optimism.",
          "It does not say which threshold to use, and a curve from the records the model was fitted to flatters "
          "it: check it on new records too."),
    Topic("funnel", "Units compared by their case mix (funnel plot)",
          "Each unit's observed events are set against the events the model expects from its own patients' risks "
          "(the sum of their predicted risks). The funnel lines show how far the ratio strays by chance alone, "
          "narrowing as units grow.",
          "A unit above the 99.8% line has more events than its case mix predicts, beyond what chance easily "
          "explains; between the 95% and 99.8% lines it is at the edge. When units spread more than chance "
          "allows, the lines are widened (Spiegelhalter 2005).",
          "The 95% and 99.8% limits follow Spiegelhalter (2005); a unit just outside the 95% line is expected "
          "about once in 40 units by chance alone.",
          "A unit outside the lines is a reason to look closer, not a judgement: differences the model does not "
          "capture, or records coded differently, move units too."),
    Topic("shrinkage", "The shrunk model",
          "When a bootstrap expects a calibration slope below 1 on new patients, the model's risks are too "
          "extreme. Shrinking multiplies every coefficient by that slope and re-estimates the intercept, so the "
          "risks move toward the average while still adding up to the observed events.",
          "The shrunk model's risks are what to expect to hold on similar new patients; predictions and saved "
          "sessions then use it. Odds ratios move toward 1.",
          "Uniform shrinkage by the bootstrap slope is the usual remedy (Van Houwelingen & Le Cessie 1990; "
          "Steyerberg 2019); with a slope near 1 it changes little.",
          "It does not repair a model with too few events for its predictors, and the tests and intervals of the "
          "coefficients stay those of the ordinary fit."),
    Topic("new_file", "A saved model checked on a new file",
          "The saved coefficients are applied unchanged to records of another time or site. Observed over "
          "expected events, calibration-in-the-large and slope, the smoothed calibration curve with its band and "
          "the calibration index show whether its risks still hold there.",
          "O/E near 1, calibration-in-the-large near 0, slope near 1 and a band that holds the diagonal mean the "
          "risks hold. Below 1, the slope says the risks are too extreme there.",
          "The file should have the rows Riley et al. (2024) ask for (shown beside the figures); with fewer, the "
          "intervals are too wide to be sure.",
          "A model that holds on one file may not hold on another, and good calibration does not mean the model "
          "is worth acting on: see the decision curve."),
)

BY_KEY = {t.key: t for t in TOPICS}
