"""The site's longer wording: page leads, reading guides, notes and cautions.

Kept apart from the page builders so the words can be read and edited in one
place. Text with ``{name}`` fields is filled with :meth:`str.format` by the
page that shows it; everything else is shown as written.
"""

from __future__ import annotations

MONEY_CAUTIONS = (
    "These are statistical estimates from past behaviour, shown with their uncertainty; "
    "the future can differ, above all where a figure extrapolates past the observed tenures.",
    "They are inputs to judgement, not accounting entries: the company's actuarial and "
    "accounting standards, and licensed practitioners, decide how they may be used.",
    "Reserving and pricing bases are for qualified actuaries to set under local standards.",
)
ACTUARIAL_CAUTIONS = (
    "Rates are estimates from the observed exposure and churns, with Poisson intervals; "
    "months with little exposure carry wide intervals.",
    "Reserving and pricing bases are for qualified actuaries to set under local standards; "
    "these tables are evidence for that work, not a basis in themselves.",
)

# --------------------------------------------------------------------------- overview
OVERVIEW_LEAD = ("How many customers stay, for how long, and what moves the odds of "
                 "leaving.")
OVERVIEW_RETENTION_GUIDE = (
    "The line is the share of customers still subscribed after each month of tenure "
    "(Kaplan–Meier); the shaded band is its {level} interval. A steep early drop means many "
    "leave soon after starting.")
HAZARD_WORDS_INTRO = ("The three largest effects in the proportional-hazards model, each "
                      "compared with its reference group and holding the others fixed:")

# --------------------------------------------------------------------------- curves, cohorts
CURVES_LEAD = ("Kaplan–Meier retention: the share of customers still subscribed after each "
               "month of tenure, overall and by segment, with delayed entry and censoring at "
               "the as-of date.")
CURVES_ALL_GUIDE = (
    "Share still subscribed by months of tenure, with its {level} interval band. The table "
    "gives the number still at risk at each tenure: where it is small, the curve rests on "
    "few customers.")
CURVES_SEGMENT_INTRO = "Each spell is placed by its {segment} at the start of the spell ({basis}). "
CURVES_SEGMENT_GUIDE = (
    "One line per {segment}; shaded bands are {level} intervals. Lines that stay apart with "
    "bands that do not overlap point to a real difference. The table lists the number still "
    "at risk at chosen tenures.")
COHORTS_LEAD = ("Retention of each signup month's customers by months since start. Every "
                "cell is a Kaplan–Meier estimate, so customers still subscribed count only "
                "for the months they were observed.")
COHORTS_GUIDE = (
    "Each row is a signup month, each column a month of tenure; the colour is the "
    "Kaplan–Meier share still subscribed. Read down a column to compare cohorts at the same "
    "age. Blank cells cannot be observed: the cohort has not reached that tenure by the "
    "as-of date, or (for cohorts that began before the observation window) its customers "
    "were not yet under observation at that tenure.")
COHORTS_OUTLINE_GUIDE = ("Cells with a dashed outline belong to cohorts that signed up before "
                         "the observation window began.")
COHORTS_TRUNCATED = (
    "{count} ({first} to {last}) signed up before the observation window began and are "
    "outlined: their customers are counted only from the day the window opened (up to "
    "{days} into their life), so those cells are retention among customers still "
    "subscribed then, not retention from signup.")

# --------------------------------------------------------------------------- hazards
HAZARDS_LEAD = ("What raises or lowers the risk of churn at any tenure, from the "
                "proportional-hazards model and the Weibull model.")
WEIBULL_TIME_RATIOS_GUIDE = (
    "A time ratio stretches (above 1) or shrinks (below 1) the whole lifetime of a customer "
    "with that attribute, against the reference group: 1.3 means customers stay 30 % "
    "longer. Whiskers are {level} intervals; a whisker that crosses the dashed line at 1 is not "
    "a clear difference.")
COX_GUIDE = (
    "Each dot is how many times more likely (above 1) or less likely (below 1) customers "
    "with that attribute are to churn at any given tenure than the reference group, other "
    "attributes held fixed; whiskers are {level} intervals (robust, clustered by customer). A "
    "numeric attribute is read per unit.")
PH_TEST_GUIDE = (
    "Grambsch–Therneau test on scaled Schoenfeld residuals: a small p-value says that "
    "attribute's hazard ratio changes with tenure, so the single ratio above is an average "
    "over tenure. With many customers small, harmless departures also reach small p-values.")
COX_INTRO = ("Cox proportional-hazards model ({ties} ties) on {rows} rows, {customers} "
             "customers and {churns} churns; each attribute is compared with its reference "
             "level.")
TENURE_BANDS_TITLE = "Hazard ratios that change with tenure"
TENURE_HELD = ("The headline ratios of {terms} hold at every tenure (their test passes, "
               "p ≥ {alpha:g}).")
TENURE_NONE_HELD = "No attribute passes the test: every headline ratio is an average over tenure."
TENURE_AVERAGED = ("The headline ratios of {terms} are averages over tenure: below, each is "
                   "estimated separately in each tenure band.")
TENURE_BANDS_GUIDE = (
    "The Cox model refitted with this attribute's ratio free to differ by tenure band (the "
    "spells are cut at the band edges; the other attributes keep one ratio each). "
    "Intervals are {level}; a band with few churns has a wide interval.")
TENURE_TREND = {
    "fades": "the effect fades with tenure",
    "grows": "the effect grows with tenure",
    "reverses": "the effect reverses with tenure",
    "steady": "the ratio moves little from the first band to the last",
}

# --------------------------------------------------------------------------- model fit
FIT_LEAD = ("Do the fitted models describe the data? Each is set against the Kaplan–Meier "
            "curve and compared by information criteria.")
COX_CURVE_NOTE = (
    "The Cox curve averages each customer's predicted retention with the attributes held at "
    "their values at the start of the spell. States that begin later (payment recovery, "
    "pauses, price changes) are not in it, so where they raise churn this curve lies above "
    "the observed one: it reads the model for customers who stay in their starting state, "
    "and is not a test of the model's fit.")
FIT_CURVES_GUIDE = (
    "The solid step line is the Kaplan–Meier estimate from the data; dashed lines are the "
    "models (without covariates, so each describes the whole book). A model that follows the "
    "step line over the observed tenures is fit to use for projections; a gap shows where "
    "its shape is wrong.")
LOGLOG_GUIDE = (
    "Dots are the Kaplan–Meier estimates; lines are the Weibull model with one level per "
    "segment. Under a Weibull proportional-hazards model the dots of each segment lie on a "
    "straight line, and the lines are parallel. Curving dots mean the Weibull shape is "
    "wrong; crossing lines mean the hazards are not proportional.")
CRITERIA_INTRO = ("The same covariates in each model; lower AIC or BIC is better, and a "
                  "difference under about 2 is no real difference (common practice).")
CRITERIA_GUIDE = ("One row per model. delta_aic and delta_bic are the distance to the best "
                  "model; BIC counts the number of churns as the sample size.")

# --------------------------------------------------------------------------- value
VALUE_LEAD = ("What a customer is worth in discounted margin, for new customers by segment "
              "and for the active base.")
VALUE_SEGMENTS_GUIDE = (
    "Bars are the expected discounted margin of one new customer over the horizon; whiskers "
    "are {level} intervals from the model's parameter uncertainty only (not from future changes "
    "in price, cost or behaviour). Compare segments by whether their whiskers overlap.")
VALUE_BASE_GUIDE = (
    "For each customer active on the as-of date: the expected discounted margin still to "
    "come, given the tenure already reached, summed by segment. Intervals cover model "
    "uncertainty only.")
VALUE_DISCOUNT = (
    "annual discount rate {annual} → monthly rate d = ({gross})^(1/12) − 1 = "
    "{monthly}; month k's margin is received at the end of month k of tenure and discounted "
    "by (1 + d)^−k")
VALUE_BASE_INTRO = ("{customers} active customers are worth {total} in expected discounted "
                    "margin {horizon}.")
VALUE_MONEY = ("money figures {unit}: per-customer values with {decimals} decimals, totals "
               "over many customers rounded to whole units")
FINANCE_INTRO = ("One row per figure and segment, with every assumption and the caution on "
                 "each row, for finance systems.")
FINANCE_GUIDE = (
    "The same figures as above in one file: 'new customer' rows give the value of one new "
    "customer, 'active base' rows the residual value of the segment's active customers. The "
    "CSV also carries the interval method, margin basis, timing, the currency (when the "
    "project file sets one) and the caution on every row; its numbers keep full precision.")

# --------------------------------------------------------------------------- experiments
EXPERIMENTS_LEAD = ("One section per declared experiment: did the treatment change "
                    "retention and revenue against the control?")
NO_EXPERIMENTS = ("Declare a pricing or retention experiment in retain.toml under "
                  "[experiments.NAME] to see its verdict here.")
VERDICT_CAUTION = ("Verdicts are statistical: an interval that excludes no effect is "
                   "evidence, not proof, and an interim verdict can change as the experiment "
                   "matures.")
DETECTABLE_EFFECT = ("With the {events} churns observed, the smallest hazard ratio this "
                     "experiment could detect for {treatment} (80 % power, 5 % two-sided) is "
                     "about {ratio:.2f}.")
EXPERIMENT_CURVES_GUIDE = ("One line per arm, with {level} bands, up to the analysis horizon. "
                           "Lines that part early and stay apart show an effect on churn.")
EXPERIMENT_COMPARISON_GUIDE = (
    "Per treatment arm: the adjusted hazard ratio, the difference in restricted mean tenure "
    "(days kept within the horizon) and in revenue per assigned customer, each with its "
    "{level} interval.")
EXPERIMENT_ARMS_GUIDE = "Customers, churns and revenue per arm."
EXPERIMENT_BALANCE_GUIDE = (
    "Share of each attribute level per arm. Large differences (flagged) mean the arms were "
    "not comparable, and only the adjusted hazard ratio should be read.")

# --------------------------------------------------------------------------- data quality
QUALITY_LEAD = ("Every input row is either used or set aside with a reason; this page shows "
                "the count of each and a sample of the rows set aside.")
NO_RECONCILIATION = ("This run started from a start-stop table prepared elsewhere, so there "
                     "is no event-log reconciliation to show.")
TABLE_INTRO = ("What the models were fitted on: one row per customer, spell and interval "
               "with constant attributes.")
RECONCILIATION_GUIDE = ("Rows read from the event log, by what happened to them; the rows "
                        "in are the sum of the other lines.")
RECONCILIATION_IDENTITY = (
    "Rows in ({rows_in}) = rows used ({used}) + outside the window ({outside}) + ignored "
    "({ignored}) + quarantined ({quarantined}).")
RECONCILIATION_TABLE = ("Start-stop table: {rows} rows, {customers} customers, {spells} "
                        "spells, {churns} churns.")
QUARANTINE_GUIDE = (
    "Up to {sample} rows per reason, with their original values; the CSV holds every "
    "quarantined row. Fix the source or the mapping in retain.toml and run again.")

# --------------------------------------------------------------------------- actuarial
DECREMENTS_LEAD = (
    "Churn read as decrements: exposure in customer-months, churns by cause, central rates m "
    "and monthly probabilities q by month of tenure, with survivors per 10,000.")
DECREMENTS_GUIDE = (
    "Dots are the crude q = 1 − exp(−m) of each tenure month with exact Poisson {level} "
    "intervals (shaded); the line, where shown, is the graduated rate. Early months often "
    "carry the highest churn; wide bands at long tenures reflect little exposure.")
GRADUATION_GUIDE = (
    "Whittaker–Henderson graduation with the smoothing chosen by generalised "
    "cross-validation. The chi-square, signs and grouping-of-signs tests ask whether the "
    "crude rates stray from the graduated ones more than chance allows; p-values under 0.05 "
    "call for a second look.")
BANDS_GUIDE = (
    "One row per band (a, b] of tenure in days: a churn on an edge counts in the band that "
    "ends there. m is churns per customer-month; q is the probability of churning within the "
    "band (1 − exp(−m × the band's width in months)), so bands of different widths are not "
    "compared by q but by m.")
EXPECTED_LEAD = ("Is churn what the basis expected? Observed churns against the churns the "
                 "basis predicts for the same exposure, by segment, cohort and calendar "
                 "month.")
AE_BASIS_INTRO = (
    "Expected churns come from {basis}: for every start-stop row the basis's hazard is "
    "integrated over the row's interval and summed by segment. A/E above 1 means more churn "
    "than the basis expects. Intervals: {interval}.")
AE_GUIDE = (
    "Each bar (or point) is actual ÷ expected churns with its {level} exact Poisson interval; "
    "the dashed line at 1 is 'as the basis expects'. Where the interval excludes 1 the level "
    "is flagged. The credibility column blends a small level's experience with the whole "
    "book (limited fluctuation, full credibility at {full_credibility:,.0f} expected churns; "
    "common practice).")
CAUSES_LEAD = (
    "Voluntary churn (a customer chose to leave) and involuntary churn (payment failed) have "
    "different causes and cures; here they are kept apart as competing risks.")
INCIDENCE_GUIDE = (
    "Solid lines are the probability of having churned from each cause by a given month, "
    "with {level} bands (Aalen–Johansen: the causes add up to all churn). Dashed lines are "
    "1 − Kaplan–Meier with the other cause treated as censoring, which answers 'what if the "
    "other cause did not exist' and so overstates each cause.")
CAUSE_COX_INTRO = (
    "One Cox model per cause, the other cause treated as censored (cause-specific hazards). "
    "A hazard ratio compares the rate of leaving for that reason among customers still "
    "subscribed; it is not a ratio of the shares above.")
CAUSE_COX_GUIDE = (
    "Each attribute appears once per cause. An attribute that raises one kind of churn and "
    "not the other points to its cure: pricing and product for voluntary churn, payment "
    "recovery for involuntary churn. Whiskers are {level} intervals.")
