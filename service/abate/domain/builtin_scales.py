"""Built-in rating scale sets (severity, occurrence, detection) shipped with Abate."""

# The labels and criteria below are the Abate project's own wording, written as
# a neutral starting point. A company should adapt them to its own rating
# scales and products before relying on them. Ratings for safety or regulatory
# effects need review by qualified people.
#
# Each level is (value, label, criteria). Values ascend and each occurs once.

BUILTIN_SCALE_SETS = [
    {
        "name": "General 1-10",
        "description": (
            "A ten-step scale for detailed process or design studies where fine distinctions between ratings "
            "are useful."
        ),
        "default_action_threshold": 100,
        "default_severity_threshold": 9,
        "severity": [
            (1, "No effect", "Nobody would notice anything; fit, function and the next operation are unaffected."),
            (
                2,
                "Barely noticed",
                "Only a careful or trained observer would spot a small cosmetic flaw. The item works fully.",
            ),
            (3, "Small flaw", "Most users notice a small flaw in look, sound or feel. Function is unaffected."),
            (
                4,
                "Mild annoyance",
                "Look or comfort is clearly worse and some users would complain. A little rework may be needed.",
            ),
            (
                5,
                "Convenience reduced",
                "A convenience or secondary feature works less well. Part of a batch may need rework.",
            ),
            (
                6,
                "Secondary feature lost",
                "A secondary feature stops working while the main job is still done. Some parts are scrapped.",
            ),
            (
                7,
                "Main job degraded",
                "The main job is still done but below specification. The user is clearly dissatisfied.",
            ),
            (
                8,
                "Main job lost",
                "The item can no longer do its main job. Affected parts are scrapped or the line stops.",
            ),
            (
                9,
                "Rule breach, signalled",
                (
                    "Breaks a safety or legal requirement, or puts a person at risk, but gives a clear sign "
                    "before it happens."
                ),
            ),
            (
                10,
                "Sudden risk to people",
                "Could injure a person or break a safety or legal requirement suddenly, with no sign beforehand.",
            ),
        ],
        "occurrence": [
            (
                1,
                "Designed out",
                "The cause is removed by the design or the process itself; the failure is not expected ever.",
            ),
            (2, "Isolated", "Fewer than roughly one in a million parts; no failures known on similar items."),
            (3, "Rare", "Roughly one in two hundred thousand parts; single failures seen on similar items."),
            (4, "Uncommon", "Roughly one in thirty thousand parts."),
            (5, "Occasional", "Roughly one in five thousand parts; seen now and then on similar items."),
            (6, "Recurring", "Roughly one in a thousand parts; shows up every few weeks."),
            (7, "Frequent", "Roughly one in three hundred parts; shows up most weeks."),
            (8, "Common", "Roughly one in eighty parts; shows up most shifts."),
            (9, "Persistent", "Roughly one in twenty-five parts; a known, ongoing problem."),
            (10, "Nearly every run", "About one in a handful of parts or more; expected in nearly every run."),
        ],
        "detection": [
            (
                1,
                "Error-proofed",
                "A fixture, sensor or interlock makes the failure impossible, or the part cannot leave the station.",
            ),
            (
                2,
                "Automatic stop",
                "An automatic check at the station finds the failure and stops or locks out the part.",
            ),
            (
                3,
                "Automatic check later",
                "An automatic check at a later station finds the failure and sorts the part out.",
            ),
            (4, "Gauge on every part", "Every part is checked with a go/no-go gauge or test rig; a miss is unlikely."),
            (
                5,
                "Sampled measurement",
                "Parts are measured on a sampling plan; a short run of bad parts can slip through.",
            ),
            (
                6,
                "Manual check",
                "An operator checks every part by hand or eye against a reference; misses happen at times.",
            ),
            (7, "Look only", "Only an unaided look by the operator, and the failure is hard to see."),
            (8, "Audit or side sign", "Only random audits or indirect signs might reveal the failure."),
            (9, "Unsuited check", "A check exists but is not aimed at this failure and will probably miss it."),
            (10, "No control", "No control in place can catch the failure before it reaches the customer."),
        ],
    },
    {
        "name": "Compact 1-5",
        "description": "A five-step scale for quick studies and small teams where coarse ratings are enough.",
        "default_action_threshold": 20,
        "default_severity_threshold": 5,
        "severity": [
            (1, "Not noticed", "No effect a user would notice."),
            (2, "Small flaw", "A small flaw in look or feel; the item works fully."),
            (3, "Reduced function", "The item works, but less well; the user is dissatisfied or rework is needed."),
            (4, "Function lost", "The main function fails; parts are scrapped or returned."),
            (5, "Harm or rule breach", "Could harm a person or break a safety or legal requirement."),
        ],
        "occurrence": [
            (1, "Not expected", "Prevented by the design or the process; no failures seen on similar items."),
            (2, "Rare", "Isolated failures on similar items; roughly one in tens of thousands."),
            (3, "Occasional", "Seen now and then; roughly one in a few hundred to a few thousand."),
            (4, "Frequent", "Seen regularly; roughly one in a few dozen."),
            (5, "Nearly every run", "About one in a handful of parts or more; expected in most runs."),
        ],
        "detection": [
            (
                1,
                "Cannot escape",
                "Error-proofing or an interlock blocks the failure, or a proven automatic check always finds it.",
            ),
            (2, "Automatic check", "An automatic test or full gauge check finds it reliably before it moves on."),
            (3, "Manual or sampled", "A manual check or a sampled test will likely, but not surely, find it."),
            (4, "Weak check", "Only random audits or indirect signs might reveal it."),
            (5, "No control", "Nothing in place can catch it before it reaches the customer."),
        ],
    },
]

# The Abate project's own rate bands for the built-in ten-step occurrence scale, in failures per
# thousand units: the rate at which each level starts (level 1 from zero). Each band holds the typical
# rate its criteria above name; a company should set bands from its own products and data.
BUILTIN_OCCURRENCE_BANDS = {
    "General 1-10": {
        "rate_basis": "per_thousand_units",
        "starts": {1: 0, 2: 0.0005, 3: 0.002, 4: 0.015, 5: 0.08, 6: 0.5, 7: 2, 8: 6, 9: 20, 10: 80},
    },
}
