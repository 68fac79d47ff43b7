"""The report's fixed wording: cautions, the four-fifths note and the methods entries.

Takes nothing and gives authored text only: the cautions every report carries, the note
on what the four-fifths rule is and is not, and the methods entries (title and an HTML
template whose ``{placeholders}`` the page fills with escaped values), keyed by the
summary section they explain. Keeping the wording here lets the sections stay about
layout, and lets a reviewer read every sentence the page can say in one place.
"""

from __future__ import annotations

#: Cautions every report carries: (headline, explanation, keyword). The headlines stand at
#: the top of the page; the full text closes it, unless a caution recorded in the summary
#: already speaks of the same thing (it contains the keyword), so nothing is said twice.
STANDARD_CAUTIONS: tuple[tuple[str, str, str], ...] = (
    (
        "A statistical disparity is a reason to look closer, not proof of discrimination.",
        "The figures describe where a service footprint reaches and who lives there. A gap "
        "between groups, a cluster of unserved areas or an enclave is a pattern worth "
        "examining; it does not by itself show intent, practice or cause.",
        "proof",
    ),
    (
        "Results depend on the areal units chosen.",
        "Other boundaries or another level of geography (tracts, block groups, blocks) can "
        "give other rates and indices for the same footprint: the modifiable areal unit "
        "problem. A partly covered area counts by its covered fraction, which assumes that "
        "people are spread evenly within it.",
        "areal unit",
    ),
    (
        "Population figures are estimates with error.",
        "Survey estimates such as those of the American Community Survey carry margins of "
        "error, wide for small areas and small groups; differences within those margins may "
        "not be real.",
        "margin",
    ),
    (
        "Legitimate business factors must be considered.",
        "Where a service is offered can depend on demand, cost, zoning, existing facilities, "
        "size and financial condition and other factors not measured here; any disparity "
        "must be weighed against them.",
        "business",
    ),
    (
        "Legal conclusions belong to counsel and regulators.",
        "Whether a pattern breaches any law is for counsel and the responsible regulators to "
        "decide under the applicable law. This report makes no legal finding.",
        "counsel",
    ),
)

FOUR_FIFTHS_NOTE = (
    "The four-fifths rule of 29 CFR 1607.4(D) is a rule about employment selection: a "
    "selection rate less than four-fifths (80%) of the rate of the group with the highest "
    "rate is generally regarded as evidence of adverse impact. It is used here only as a "
    "screening rule of thumb for coverage rates, not as a legal test; a ratio of exactly "
    "0.80 is not flagged."
)

#: Methods entries by topic: (title, HTML template). A topic is shown when its data are.
METHODS: dict[str, tuple[tuple[str, str], ...]] = {
    "coverage": (
        (
            "Coverage rates",
            "For group g with x<sub>gi</sub> people in area i, and c<sub>i</sub> the covered "
            "fraction of area i (its area inside the footprint over its whole area):"
            '<span class="formula">r<sub>g</sub> = &Sigma;<sub>i</sub> c<sub>i</sub> '
            "x<sub>gi</sub> / &Sigma;<sub>i</sub> x<sub>gi</sub></span>The served-area rate "
            "puts 1 for a served area and 0 otherwise in place of c<sub>i</sub>; an area is "
            "served when its covered fraction is at least {threshold}. Ratios divide by the "
            "rate of {comparison}; differences subtract it and are shown in percentage points.",
        ),
        (
            "Four-fifths screen (29 CFR 1607.4(D))",
            "A group is flagged when its ratio is strictly less than 4/5. The comparison is "
            "made exactly on the counts, not on the rounded ratio: with a of b people covered "
            "in the group and c of d in the comparison group, the flag is 5&middot;a&middot;d "
            "&lt; 4&middot;b&middot;c, in exact rational arithmetic, and it is raised only "
            "when the shortfall exceeds one part in a billion (10<sup>&minus;9</sup>) of the "
            "right-hand side, so that rounding in the covered counts cannot flag a ratio of "
            "exactly 4/5 (for example 60,000 of 100,000 against 75,000 of 100,000). The same "
            "rule applies in the sweeps and comparisons. {four_fifths}",
        ),
    ),
    "area_classes": (
        (
            "Classes of area (12 CFR 228.12(m))",
            "Majority-minority areas: minority share (population less non-Hispanic White "
            "alone) {majority_rule}. Income tiers follow "
            "the CRA rule, 12 CFR 228.12(m): the area's median family income as a percent of "
            "the area median is low below 50, moderate from 50 to below 80, middle from 80 to "
            "below 120 and upper from 120; an area with no income figure is unknown, not low. "
            "Areas served: share of the class's areas that are served.",
        ),
    ),
    "distance": (
        (
            "Distance",
            "Geodesic distance from a representative point inside each area to the nearest "
            "service point; each group's mean and (lower, weighted) median weight areas by "
            "the group's count.",
        ),
    ),
    "segregation": (
        (
            "Dissimilarity index (Duncan and Duncan 1955)",
            '<span class="formula">D = &frac12; &Sigma;<sub>i</sub> | x<sub>i</sub>/X '
            "&minus; y<sub>i</sub>/Y |</span>with x<sub>i</sub>, y<sub>i</sub> the counts of "
            "two groups in area i and X, Y their totals (Duncan, O. D. and Duncan, B. 1955, "
            "American Sociological Review 20(2), 210&ndash;217). D vs reference pairs a group "
            "with the reference group; D vs rest with everyone else. Coverage dissimilarity "
            "applies D to two bins, the served and the unserved areas, and so equals the gap "
            "in served-area rates; areal coverage dissimilarity does the same with the "
            "covered and uncovered parts of each area.",
        ),
        (
            "Isolation, exposure and correlation ratio (Massey and Denton 1988)",
            '<span class="formula"><sub>x</sub>P*<sub>x</sub> = &Sigma;<sub>i</sub> '
            "(x<sub>i</sub>/X)(x<sub>i</sub>/t<sub>i</sub>), &nbsp; <sub>x</sub>P*<sub>y</sub>"
            " = &Sigma;<sub>i</sub> (x<sub>i</sub>/X)(y<sub>i</sub>/t<sub>i</sub>), &nbsp; "
            "&eta;&sup2; = (<sub>x</sub>P*<sub>x</sub> &minus; P) / (1 &minus; P)</span>with "
            "t<sub>i</sub> the population of area i and P = X/T the group's overall share "
            "(Massey, D. S. and Denton, N. A. 1988, Social Forces 67(2), 281&ndash;315).",
        ),
    ),
    "gap_test": (
        (
            "Permutation test of the coverage gap",
            "The difference is the group's served-area rate minus the reference group's "
            "(negative when the group is less served), the sign used for every difference in "
            "this report. The served "
            "status is dealt at random to the same number of areas, {permutations} times; "
            "two-sided p = (1 + number of |simulated difference| &ge; |difference|) / "
            "(permutations + 1), one-sided p counts simulated differences &le; the observed "
            "one (Hope, A. C. A. 1968, Journal of the "
            "Royal Statistical Society B 30(3), 582&ndash;598).",
        ),
    ),
    "clustering": (
        (
            "Moran's I (Moran 1950; Cliff and Ord 1981)",
            '<span class="formula">I = (n / S<sub>0</sub>) &Sigma;<sub>i</sub>&Sigma;<sub>j'
            "</sub> w<sub>ij</sub> z<sub>i</sub> z<sub>j</sub> / &Sigma;<sub>i</sub> z<sub>i"
            "</sub>&sup2;, &nbsp; E[I] = &minus;1/(n &minus; 1)</span>with z the deviations "
            "from the mean, w<sub>ij</sub> the row-standardised contiguity weights and "
            "S<sub>0</sub> their sum (Moran, P. A. P. 1950, Biometrika 37, 17&ndash;23). "
            "Variance and z under randomisation follow Cliff, A. D. and Ord, J. K. 1981, "
            "Spatial Processes: Models and Applications. The normal p-values p_norm and "
            "p_rand are one-sided, in the direction of z: P(Z &ge; |z|); the keys "
            "p_norm_two_sided and p_rand_two_sided hold 2&nbsp;P(Z &ge; |z|). This is the one "
            "convention of every Moran p-value in summary.json, the residual Moran's I of "
            "the models included. p_sim is a pseudo p-value from "
            "random permutations of the values over the areas, (1 + number at least as "
            "extreme) / (permutations + 1).",
        ),
        (
            "Join counts and bivariate Moran's I",
            "Join counts tally neighbour pairs both served, both unserved or mixed, under "
            "binary weights (Cliff and Ord 1981); more unserved&ndash;unserved joins than "
            "expected means unserved areas cluster. The bivariate Moran's I relates one "
            "variable in an area to another in its neighbours (Wartenberg, D. 1985, "
            "Geographical Analysis 17(4), 263&ndash;283).",
        ),
        (
            "Local Moran's I, LISA (Anselin 1995)",
            '<span class="formula">I<sub>i</sub> = z<sub>i</sub> &Sigma;<sub>j</sub> '
            "w<sub>ij</sub> z<sub>j</sub> / m<sub>2</sub>, &nbsp; m<sub>2</sub> = "
            "&Sigma;<sub>i</sub> z<sub>i</sub>&sup2; / n</span>Each area's significance comes "
            "from conditional permutations, the area's value held fixed and its neighbours "
            "drawn from the rest (Anselin, L. 1995, Geographical Analysis 27(2), "
            "93&ndash;115). A significant area is high-high, low-low, high-low or low-high by "
            "its quadrant of the Moran scatterplot. With false discovery rate control the "
            "p-values pass the step-up procedure of Benjamini, Y. and Hochberg, Y. 1995, "
            "Journal of the Royal Statistical Society B 57(1), 289&ndash;300.",
        ),
    ),
    "enclaves": (
        (
            "Enclaves and their Monte Carlo test",
            "Unserved areas are grouped into connected components under the contiguity "
            "rule; a component is an enclave when the share of its outer boundary, in metres, "
            "shared with served areas reaches {min_surround} (the study area's edge "
            "counts as not served). For an enclave of k areas, random connected sets of k "
            "areas are grown, each from a seed area drawn at random, adding at every step an "
            "area drawn at random among the set's neighbours; {draws} such sets are drawn. "
            "p = (1 + number of sets whose {contrast} share is at least the enclave's) / "
            "(draws + 1) (a Monte Carlo test in the sense of Hope 1968).",
        ),
    ),
    "comparison": (
        (
            "Footprints compared",
            "Every footprint is measured over the same analysed areas, groups and served "
            "threshold. A group's ranking ratio is its {comparison_rate} divided by the "
            "reference group's, recomputed from the rates so that every footprint stands on "
            "one scale; footprints are {ranking_rule}.",
        ),
    ),
    "change": (
        (
            "Change between footprints",
            "An area lost service when it is served under the earlier footprint (covered "
            "fraction at least {change_threshold}) and not under the later one, and gained "
            "service in the reverse case; areas present under one footprint only are left "
            "out. Group rates are recomputed over the areas present under both; changes are "
            "after minus before, in percentage points.",
        ),
    ),
    "peers": (
        (
            "Two-proportion z-test of activity against peers (textbook; from memory)",
            '<span class="formula">z = (p<sub>1</sub> &minus; p<sub>2</sub>) / &radic;[p(1 '
            "&minus; p)(1/n<sub>1</sub> + 1/n<sub>2</sub>)], &nbsp; p = (x<sub>1</sub> + "
            "x<sub>2</sub>) / (n<sub>1</sub> + n<sub>2</sub>)<br>95% interval: (p<sub>1</sub> "
            "&minus; p<sub>2</sub>) &plusmn; 1.96 &radic;[p<sub>1</sub>(1 &minus; p<sub>1</sub>)"
            "/n<sub>1</sub> + p<sub>2</sub>(1 &minus; p<sub>2</sub>)/n<sub>2</sub>]</span>"
            "with x<sub>1</sub> of a lender's n<sub>1</sub> actions in majority-minority areas "
            "and x<sub>2</sub> of n<sub>2</sub> for all other lenders combined, so a lender is "
            "never compared with itself. The test uses the pooled standard error, which the "
            "hypothesis of equal shares implies; the interval uses the unpooled one. A lender "
            "is flagged when its share is below its peers' with one-sided p below "
            "{peer_alpha}; a level of 0.05 is common practice in redlining reviews, not a rule. "
            "Formulas as in Agresti, A. 2013, Categorical Data Analysis, 3rd ed., section 3.1 "
            "(section cited from memory).",
        ),
    ),
    "explain_models": (
        (
            "Logit and fractional logit of exclusion (Papke and Wooldridge 1996)",
            "The logit models the odds that an area is unserved. The fractional logit models "
            "the uncovered share of each area (1 &minus; covered fraction) with the same "
            "logistic mean, fitted by Bernoulli quasi-likelihood with robust (sandwich) "
            "standard errors (Papke, L. E. and Wooldridge, J. M. 1996, Journal of Applied "
            "Econometrics 11(6), 619&ndash;632). Minority share enters per {minority_step} "
            "percentage points; an odds ratio exp(b) has the 95% Wald interval "
            "exp(b &plusmn; 1.96 se). Each model is fitted on minority share alone and with "
            "the controls, on the same areas; the change is 100 &times; (odds ratio with "
            "controls / odds ratio alone &minus; 1).",
        ),
        (
            "Moran's I of the model residuals",
            "Moran's I of each model's Pearson residuals under the contiguity weights, with "
            "its z-score under randomisation (Cliff and Ord 1981), computed by the same code "
            "as the global Moran's I; p_rand is one-sided and p_rand_two_sided two-sided, as "
            "there. |z| above 1.96 (two-sided p below 0.05) means that "
            "neighbouring areas' residuals are alike: a spatial pattern the model does not "
            "account for, which also makes its standard errors likely too small.",
        ),
    ),
    "explain_rules": (
        (
            "Rules ranked by extended lift (Pedreschi, Ruggieri and Turini 2008)",
            '<span class="formula">elift = conf(A,B &rarr; C) / conf(B &rarr; C), &nbsp; '
            "slift = conf(A,B &rarr; C) / conf(&not;A,B &rarr; C), &nbsp; risk difference = "
            "conf(A,B &rarr; C) &minus; conf(&not;A,B &rarr; C)</span>with A the protected "
            "condition ({protected}), B a context of area traits and C the outcome "
            "({outcome}). Support is the share of areas with A and B; confidence "
            "conf(A,B &rarr; C) is the share of those with C (Pedreschi, D., Ruggieri, S. and "
            "Turini, F. 2008, Discrimination-aware data mining, Proceedings of the 14th ACM "
            "SIGKDD Conference, 560&ndash;568; pages from memory). Selection lift and risk "
            "difference compare with the context's areas without A (from memory, the same "
            "authors' later work).",
        ),
    ),
    "sensitivity": (
        (
            "What the sweeps vary",
            "The threshold sweep keeps the footprint and recounts which areas are served "
            "(covered fraction at least t) for t from {sweep_low} to {sweep_high}; each "
            "group's served-area rate and its ratio to {sweep_comparison} are recomputed, and "
            "the enclaves recounted (without their Monte Carlo test).",
        ),
    ),
    "sensitivity_radius": (
        (
            "The reach sweep",
            "For service points, every circle is redrawn at a multiple of its radius "
            "({radius_factors}); coverage rates (areal-weighted) and their ratios are "
            "recomputed at the audit's served threshold, and the enclaves recounted.",
        ),
    ),
}

#: Said wherever models or rules are shown, and among the closing cautions then.
ASSOCIATION_CAUTION = (
    "Associations are not causes.",
    "The models and rules measure how exclusion goes together with minority share and other "
    "traits of the areas. They do not establish why a footprint reaches where it does: a "
    "control may stand for factors not measured, and a factor that seems to explain part of "
    "a gap may itself carry it. Whether a factor is a legitimate business justification is "
    "for the examiner's judgement.",
    "causes",
)
