"""Fixed wording of reports: the method, its published references, flag meanings and the cautions."""

from __future__ import annotations

METHOD = (
    "A heated needle (or rod) of known length gives a constant, measured power q per metre to the ground. Far "
    "enough from the start, the temperature of a line source rises as ΔT ≈ q/(4πk)·(ln t + const) (Carslaw & "
    "Jaeger 1959, §10.4), so the slope of ΔT against ln t over a suitable window gives the thermal conductivity "
    "k = q/(4π·slope); the thermal resistivity is 1/k. The probe's own heat capacity and the contact resistance "
    "affect the early record only (Blackwell 1954; Jaeger 1956; de Vries & Peck 1958); the window starts after "
    "they have faded and ends before heat reaches the sample boundary or leaks along the probe. Measured power "
    "steps are superposed, the baseline drift before heating is removed, and the cooling after the heater goes "
    "off is analysed as well (ΔT ≈ q/(4πk)·ln[t/(t − t_h)]), as ASTM D5334 recommends to reduce drift effects. "
    "Uncertainties combine the fit (with correlated residuals), power, geometry and calibration (JCGM 100:2008); "
    "they are quoted as expanded uncertainties U = 2u (coverage factor k = 2, about 95 % coverage for a normal "
    "distribution).")

# Which published practice each kind of test follows, and where linerig departs from it. Standards are named by
# designation only, as the reference for the practice.
PRACTICE = {
    "needle": (
        "Practice followed: the transient line-source (thermal needle probe) method of ASTM D5334 for soil and "
        "rock, and IEEE Std 442 for thermal resistivity of soils and backfills: a probe heated at constant power "
        "per metre, its temperature rise logged, the conductivity from the slope of ΔT against ln t."),
    "cylinder": (
        "Practice followed: the transient surface-step method on a moulded specimen. The specimen, in its mould, "
        "is moved into a bath at another temperature and its centre temperature is fitted with the classical "
        "series solution for a cylinder (Carslaw & Jaeger 1959; Newman's product rule for a finite height). No "
        "probe is heated and no needle-probe standard applies; the method rests on the published solution, not "
        "on a standard test method."),
    "dryout": (
        "Practice followed: each conductivity is a needle-probe result (ASTM D5334 / IEEE Std 442 practice) on a "
        "specimen prepared at a known moisture and dry density; the critical moisture is the tangent "
        "construction of IEEE Std 442, Annex F; the curves are published soil models fitted to the points."),
    "calibration": (
        "Practice followed: the probe is checked in a medium of known conductivity, as the needle-probe practice "
        "(ASTM D5334) calls for, and the factor F = k_reference / k_measured is applied to later results."),
    "cycles": (
        "Practice followed: repeat needle-probe tests (ASTM D5334 / IEEE Std 442 practice) on one sample; "
        "repeatability and outliers by the statistics of ISO 5725-2 and ISO 5725-6."),
}
DEVIATIONS = {
    "needle": (
        "The fit window is chosen by a stated rule (after the probe's heat capacity and contact resistance have "
        "faded, before heat reaches a boundary or leaks along the probe), not picked by eye; the window used is "
        "reported with each result.",
        "The measured power of every sample is used (power steps superposed), not one mean power.",
        "A baseline drift is removed only when it stands out of its noise (more than three standard "
        "uncertainties); otherwise its possible size stays in the uncertainty.",
        "Where the late-time window is too short or curved, the result comes from the full probe model "
        "(Blackwell 1954) fitted to the heating; such a result says \"model\" in its method column.",
        "The calibration factor of the probe (see Calibration) is applied to the results.",
    ),
    "cylinder": (
        "The bath is taken to hold the specimen surface at its temperature (perfect contact, thin mould wall); a "
        "finite heat-transfer coefficient or a thick wall makes α read low.",
        "A time lag (transfer, mould wall) is fitted unless switched off; the half-time estimate ignores it.",
    ),
    "dryout": (
        "The soil-model parameters are quoted from memory of the papers (likely, not normative).",
    ),
    "calibration": (
        "The reference value is taken at the bath temperature (the mean baseline of the runs unless given).",
    ),
    "cycles": (
        "Outliers are flagged, never removed.",
    ),
}

REFERENCES = (
    "Carslaw, H. S. & Jaeger, J. C. (1959). Conduction of Heat in Solids, 2nd ed. Oxford University Press.",
    "Blackwell, J. H. (1954). A transient-flow method for determination of thermal constants of insulating "
    "materials in bulk. J. Appl. Phys. 25(2):137–144.",
    "Jaeger, J. C. (1956). Conduction of heat in an infinite region bounded internally by a circular cylinder of a "
    "perfect conductor. Aust. J. Phys. 9:167–179.",
    "de Vries, D. A. & Peck, A. J. (1958). On the cylindrical probe method of measuring thermal conductivity with "
    "special reference to soils. Aust. J. Phys. 11:255–271 and 409–423.",
    "ASTM D5334. Standard Test Method for Determination of Thermal Conductivity of Soil and Rock by Thermal Needle "
    "Probe Procedure. ASTM International.",
    "IEEE Std 442-2017. IEEE Guide for Thermal Resistivity Measurements of Soils and Backfill Materials.",
    "ASTM D5930-17. Thermal Conductivity of Plastics by Means of a Transient Line-Source Technique.",
    "JCGM 100:2008. Evaluation of measurement data — Guide to the expression of uncertainty in measurement.",
)

WORKFLOW_REFERENCES = {
    "cycles": ("ISO 5725-2:1994 and ISO 5725-6:1994. Accuracy (trueness and precision) of measurement methods "
               "and results (repeatability limit r = 2.8·s_r; Grubbs' test).",
               "Grubbs, F. E. (1969). Procedures for detecting outlying observations in samples. Technometrics "
               "11(1):1–21.",
               "Iglewicz, B. & Hoaglin, D. C. (1993). How to Detect and Handle Outliers. ASQC Quality Press."),
    "calibration": ("Huber, M. L. et al. (2012). New international formulation for the thermal conductivity of "
                    "H2O. J. Phys. Chem. Ref. Data 41:033102 (IAPWS 2011).",
                    "Manohar, K., Yarbrough, D. W. & Booth, J. R. (2000). Measurement of apparent thermal "
                    "conductivity by the thermal probe method. J. Testing & Evaluation 28(5):345–351."),
    "dryout": ("Johansen, Ø. (1975). Thermal conductivity of soils. PhD thesis, Trondheim (CRREL Draft "
               "Translation 637, 1977).",
               "Côté, J. & Konrad, J.-M. (2005). A generalized thermal conductivity model for soils and "
               "construction materials. Can. Geotech. J. 42:443–458.",
               "Lu, S., Ren, T., Gong, Y. & Horton, R. (2007). An improved model for predicting soil thermal "
               "conductivity from water content at room temperature. Soil Sci. Soc. Am. J. 71:8–14.",
               "Farouki, O. T. (1981). Thermal properties of soils. CRREL Monograph 81-1.",
               "IEEE Std 442-2017, Annex F (critical moisture content)."),
    "cylinder": ("Carslaw, H. S. & Jaeger, J. C. (1959), chapters on the slab and the cylinder.",
                 "Newman, A. B. (1936). Heating and cooling rectangular and cylindrical solids. Ind. Eng. Chem. "
                 "28:545–548."),
}

FLAGS = {
    "drift": "the ground temperature drifted before heating; the drift was removed",
    "not_settled": "the baseline had not settled; the drift correction may be poor",
    "no_baseline": "no baseline was recorded, so drift could not be removed",
    "window_short": "the fitted window spans less than a factor e in time",
    "residual_trend": "the residuals curve: boundary or axial heat loss may bias the result",
    "sample_wall": "the window ends before the sample's outer face bends the line (its bias is in the budget)",
    "noise_high": "the temperature noise is large compared with the rise",
    "heat_cool_disagree": "heating and cooling give different conductivities",
    "rise_above_limit": "the temperature rise exceeded the limit set (moisture may have moved)",
    "contact_resistance_high": "large contact resistance between probe and ground",
    "outlier": "a cycle result is an outlier (Grubbs 1 % or modified z > 3.5)",
    "straggler": "a cycle result is a straggler (Grubbs 5 %)",
    "trend_across_cycles": "results change steadily from cycle to cycle (moisture migration?)",
    "not_reequilibrated": "a cycle started before the ground had cooled back",
    "cycle_result_flagged": "the reduction flagged one or more cycles itself (see the flags per cycle)",
    "near_surface": "shallower than 0.3 m: daily temperature swings and loosened soil",
    "aborted": "the run was aborted before it finished: the result rests on a shortened record and is not final",
    "faulted": "a safety stop ended the run: the result rests on the record up to the stop and is not final",
}

BURIED_SERVICES = (
    "Locate and mark buried services (power cables, gas, water, telecoms) from records and with a locator before "
    "augering or driving a probe, and follow the local permit-to-dig rules."
)
ELECTRICAL_FIELD = ("Electrical safety: heater supplies and instruments are used on wet ground. Use a battery or a "
                    "protected (residual-current) supply, keep connections dry and inspect leads before use.")
ELECTRICAL_LAB = ("Electrical safety: heater supplies are used beside water baths and wet specimens. Use a battery "
                  "or a protected (residual-current) supply, keep connections dry and inspect leads before use.")
HOT_PROBE = "The probe is hot after heating. Let it cool before handling it, and never heat it in air."
SMALL_RISE = ("Keep the temperature rise small: strong or long heating drives moisture away from the probe and "
              "biases the result (ASTM D5334, error sources).")
DESIGN = ("Thermal design of cables and pipelines (ratings, backfill, critical moisture) is a decision for licensed "
          "engineers working to the local codes; these results are measurements, not a design.")
BATH = ("Baths and ovens: a hot bath, a hot mould and hot water scald. Handle moulds with gloves and tongs, keep "
        "the bath covered, and keep mains equipment away from spilt water.")
SPECIMEN = ("These results describe the specimen as prepared (moisture, density, temperature); ground in place may "
            "differ.")

CAUTIONS = (BURIED_SERVICES, ELECTRICAL_FIELD, HOT_PROBE, SMALL_RISE, DESIGN)   # a probe in the ground
CAUTIONS_BY_KIND = {
    "field": CAUTIONS,
    "lab": (ELECTRICAL_LAB, HOT_PROBE, SMALL_RISE, SPECIMEN, DESIGN),
    "calibration": (ELECTRICAL_LAB, HOT_PROBE, SMALL_RISE),
    "cylinder": (BATH, ELECTRICAL_LAB, SPECIMEN, DESIGN),
    "dryout": (ELECTRICAL_LAB, HOT_PROBE, SMALL_RISE, SPECIMEN, DESIGN),
}

UNCERTAINTY_STATEMENT = (
    "Every ± in this report is the expanded uncertainty U = 2u with coverage factor k = 2 (JCGM 100:2008), which "
    "gives a coverage probability of about 95 % for a normal distribution.")
SIGN_OFF = ("The results relate only to the items tested, under the conditions stated. This report shall not be "
            "reproduced except in full.")
