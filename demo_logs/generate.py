"""Generate the Kestrel Valley Water demo: help-centre pages, three weeks of search logs, truth.

An invented scenario. Kestrel Valley Water is a fictional regional water utility; every name,
address, e-mail domain and phone number below is made up or taken from a reserved range. The
script uses only the standard library and numpy, never querygap itself, so the demo stays an
outside check on the tool. Run ``python demo_logs/generate.py``; the output is byte-identical on
every run (one fixed seed, no set-order dependence, gzip mtime 0).

The simulated search engine lowercases a query, splits it on non-alphanumerics and returns the
pages (title plus main text, boilerplate excluded) that contain every token. From the change
instant it first rewrites the query with the deployed rules.
"""

from __future__ import annotations

import csv
import gzip
import html
import json
import re
import shutil
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

SEED = 20261102
OUT = Path(__file__).resolve().parent
WEEK_STARTS = {45: "2026-11-02", 46: "2026-11-09", 47: "2026-11-16"}
CHANGE_AT = "2026-11-16T00:00:00+00:00"
HUMAN_TARGET = {45: 9550, 46: 9650, 47: 10350}  # week 47 about +8 % on week 45
RESULT_CAP = 500

# Topics, one block each: "@ folder | name | popularity", then lines of "|"-separated items:
# T page titles, N nouns, A verb:noun actions, Q good queries, F topic facts. A repeated tag
# continues its list.
TOPICS_TEXT = """
@ billing | Paying your bill | 10
T Ways to pay your bill|Pay your bill online|Pay your bill by phone|Paying by bank transfer
T When your bill is due|Missed a payment
N bill|water bill|balance|payment reference|due date|card payment|bank transfer|receipt
N online account
A pay:bill|pay:balance|receive:bill|check:due date|make:card payment|find:payment reference
Q pay bill|pay my bill|bill payment|pay water bill|pay bill online|pay by card|bill due date
Q when will i receive my bill|payment reference|missed payment
F We send a bill every six months unless you pay monthly.
F If you have missed a payment, call us before the next due date and we can agree a new date.
F Card payments made online before 8pm reach your account the same day.
@ billing | Direct debit | 8
T Set up a direct debit|Change your direct debit date|Cancel a direct debit
T The direct debit guarantee|Monthly payments by direct debit|Why your direct debit amount changed
N direct debit|instalment|bank account|payment date|monthly payment|direct debit guarantee
N sort code|direct debit amount
A set up:direct debit|cancel:direct debit|change:payment date|update:bank account
Q direct debit|set up direct debit|cancel direct debit|change direct debit date|direct debit amount
Q monthly payments
F Monthly payments are collected on the date you choose.
F Your direct debit amount is reviewed once a year against your actual use.
@ billing | Help paying your bill | 6
T Payment plans|Help if you are struggling to pay|Spreading the cost of your bill
T Reduced charges for low incomes|Payment breaks|Paying in advance with a pre-payment plan
N payment plan|arrears|payment break|reduced charges|debt advice|household income|pre-payment plan
N pre-payment card
A set up:payment plan|apply for:reduced charges|request:payment break|top up:pre-payment card
Q payment plan|help paying bill|struggling to pay|reduced charges|pre-payment plan|pre-payment card
Q payment break|arrears
F If you are struggling to pay, tell us early and we will find a plan that works.
F Help paying your bill is available whatever your household income.
@ billing | Your online account | 5
T Download an account statement|Reading your account statement|Manage your online account
T Register for an online account|Close your account|Update your contact details
N account statement|online account|account number|transaction|contact details|password|account
A download:account statement|register for:online account|close:account|update:contact details
A reset:password
Q account statement|online account|register online account|close account|account number
Q reset password|update contact details
F Your account number is printed at the top of every bill.
F You can reset your password from the sign-in page at any time.
@ billing | E-bill and paperless billing | 4
T Switch to e-bill|E-bill questions answered|Receive your bill by email|Paper bills and large print
T Going paperless
N e-bill|paperless billing|email address|paper bill|large print bill|braille|bill by email
A switch to:e-bill|receive:e-bill|receive:bill by email|request:paper bill
Q e-bill|switch to e-bill|receive bill by email|paperless billing|paper bill|large print bill
F An e-bill arrives by email on the same day a paper bill would be posted.
F You can switch back to a paper bill whenever you like.
@ billing | Understanding your charges | 6
T Our charges explained|Charges for 2026 to 2027|Standing charges|How we set our charges
T Charges for homes without a meter|Surface water drainage charges
N charges|standing charge|rateable value|volumetric charge|surface water drainage|assessed charge
N charges scheme
A check:charges|compare:charges|ask for:assessed charge
Q charges|charges explained|standing charge|charges 2026|rateable value|assessed charge
Q surface water drainage
F Our charges are explained in the charges scheme published each spring.
F Charges for 2026 rise by less than inflation for most homes.
@ meters | Meter readings | 9
T Submit a meter reading|How to read your meter|Estimated bills and meter readings
T Where to find your meter|Meter reading visits|If your meter reading looks wrong
N meter reading|meter|meter serial number|estimated bill|meter chamber|dials|reading
A submit:meter reading|read:meter|find:meter|check:meter serial number
Q meter reading|submit meter reading|read my meter|where is my meter|estimated bill
Q meter reading wrong|meter serial number
F Where is my meter? It is usually under a small cover near the boundary of your property.
F If a meter reading looks wrong, send us a photo of the dials.
@ meters | Smart meters | 7
T Smart meters explained|Smart meter installation|Smart meter data and privacy|The smart meter app
T Smart meter not sending readings|Smart meter rollout in your area
N smart meter|smart meter installation|usage data|smart meter app|rollout|signal|hourly readings
A book:smart meter installation|check:usage data|download:smart meter app
Q smart meter|smart meter installation|smart meter app|smart meter data|smart meter rollout
Q smart meter not working
F The smart meter app v2.3 shows hourly readings and alerts.
F If your smart meter is not working, it keeps recording and sends the data later.
F The standard smart meter body is part KV-2210-45 and the radio unit is part KV-3104-12.
@ meters | Getting a water meter | 5
T Apply for a free water meter|Will a meter save you money|Meter installation appointments
T Switching back after a meter|Water meters in flats|Meters fitted outside your home
N water meter|meter installation|appointment|meter application|consumption
A apply for:water meter|book:appointment|track:meter application
Q free water meter|apply for water meter|water meter|meter installation|will a meter save money
F A water meter is free to fit and most small households save money.
F You can switch back within two years if a meter does not suit you.
@ leaks | Leaks on your pipes | 8
T Report a leak|Leaks on your supply pipe|Who fixes a leak|Leak allowance on your bill
T Finding a hidden leak|Leak repair schemes
N leak|supply pipe|leak allowance|boundary|plumber|leak repair|hidden leak|pipe
A report:leak|fix:leak|claim:leak allowance|find:hidden leak
Q report a leak|leak|leak on my pipe|leak allowance|who fixes a leak|hidden leak|leak repair
F Who fixes a leak depends on where it is: we repair pipes in the street, you the pipe inside.
F A leak allowance reduces your bill once the leak is fixed.
@ leaks | Burst mains | 6
T Report a burst main|What happens when a main bursts|Burst water main in your street
T Flooding from a burst main|Road closures for repairs|Compensation after a burst main
N burst main|water main|repair crew|road closure|flooding|compensation|water main repair
A report:burst main|track:water main repair|claim:compensation
Q burst main|burst water main|report burst main|water main repair|flooding from burst main
Q road closure
F A burst water main is repaired by a crew on site within hours.
F Flooding from a burst main should be reported straight away on our 24-hour line.
@ leaks | Your stopcock and internal pipes | 5
T Find your stopcock|Turn off your water at the stopcock|Frozen pipes|Protect pipes in winter
T Internal plumbing problems|The outside stopcock
N stopcock|internal stopcock|outside stopcock|frozen pipe|lagging|plumbing|pipes
A find:stopcock|turn off:stopcock|thaw:frozen pipe|fit:lagging
Q stopcock|find my stopcock|turn off water|frozen pipes|outside stopcock|stopcock location
F The stopcock is usually under the kitchen sink; turn off water there in an emergency.
F Note the stopcock location for everyone in your home.
@ supply | Supply interruptions | 8
T Check for a supply interruption|Planned interruptions in your area|No water at your property
T Alternative supplies during an interruption|Compensation for interruptions
T After an interruption: running your taps
N supply interruption|planned interruption|interruption|postcode|alternative supply
N guaranteed standards|taps|area
A check:supply interruption|enter:postcode|claim:compensation
Q supply interruption|no water|planned interruption|interruption in my area|water interruption
Q no water today|interruption compensation
F Enter your postcode on the live map to see any interruption today.
F If you have no water, check the map before you call, as we may already be fixing it.
F Interruption compensation is paid under our guaranteed standards.
@ supply | Low water pressure | 6
T Low water pressure|Check your water pressure|Pressure in tall buildings
T Why pressure drops at peak times|Pressure reducing valves|Our minimum pressure standard
N pressure|low pressure|water pressure|pressure reducing valve|peak times|flow rate
N minimum pressure
A check:water pressure|report:low pressure|test:flow rate
Q low pressure|low water pressure|water pressure|pressure problems|report low pressure|no pressure
F Pressure problems are often caused by a partly closed stopcock.
F If there is no pressure at all, check for a supply interruption first.
@ supply | Temporary use restrictions | 5
T Temporary use restrictions|What a temporary use restriction means for you
T Reservoir levels and restrictions|Exemptions from a temporary use restriction
T When restrictions end|Gardens and cars during a restriction
N temporary use restriction|restriction|reservoir levels|exemption|garden watering|car washing
N drought plan
A check:temporary use restriction|apply for:exemption|report:misuse
Q temporary use restriction|temporary use restriction 2026|is there a temporary use restriction
Q reservoir levels|restriction exemption|garden watering
F Is there a temporary use restriction now? This page always shows the current position.
F No temporary use restriction is planned for 2026 while reservoir levels stay normal.
@ supply | Standpipe hire | 3
T Standpipe hire|Standpipe licence conditions|A metered standpipe for events|Returning a standpipe
T Standpipe safety
N standpipe|standpipe licence|metered standpipe|hydrant|event|hire period
A hire:standpipe|apply for:standpipe licence|return:standpipe
Q standpipe|standpipe hire|standpipe licence|hire a standpipe|metered standpipe
F Every standpipe is fitted with a meter and a backflow valve.
F A standpipe licence lasts up to twelve months.
@ quality | Water hardness | 7
T Water hardness in your area|Hard water and limescale|Hardness by postcode
T Hardness and your appliances|Is hard water safe
N hardness|water hardness|limescale|calcium|postcode|kettle|appliances|hard water
A check:water hardness|descale:kettle|enter:postcode
Q water hardness|hardness|hard water|limescale|hardness in my area|water hardness postcode
Q is hard water safe
F Hard water is safe to drink; the hardness comes from calcium picked up from chalk.
F Check the hardness in your area by entering your postcode.
@ quality | Water quality reports | 4 | report
T Water quality report 2025: Kestrel North zone|Water quality report 2025: Kestrel South zone
T Water quality report 2025: Heronford zone|Water quality report 2025: Millbrook zone
T Water quality report 2025: Ashby Fen zone
N water quality report|water quality|zone|sample|compliance|chlorine|nitrate|test results
A download:water quality report|check:test results
Q water quality report|water quality|water quality report 2025|chlorine|nitrate|test results
F Each water quality report lists the test results for every sample taken in 2025.
F Compliance with the drinking water standards was above 99.9 per cent.
@ quality | Discoloured water | 5
T Discoloured water|Brown or yellow water from your taps|Cloudy or white water
T Discoloured water after repairs|Stains on laundry
N discoloured water|sediment|cloudy water|air bubbles|cold tap|laundry|repairs
A run:cold tap|report:discoloured water
Q discoloured water|brown water|cloudy water|white water|discoloured water after repairs
F Discoloured water after repairs clears within hours.
F Brown water usually clears if you run the cold tap for twenty minutes.
F Cloudy or white water is caused by tiny air bubbles and is harmless.
@ quality | Lead pipes | 3
T Lead pipes|Replace your lead supply pipe|The lead pipe replacement scheme|Testing for lead
T Health advice on lead
N lead pipe|lead|lead supply pipe|replacement scheme|water sample|health advice
A replace:lead pipe|request:water sample|apply for:replacement scheme
Q lead pipes|lead pipe replacement|lead in water|test for lead|lead pipe scheme
F Lead pipes were common in homes built before 1970.
F We test for lead free of charge and share the cost of replacement through the lead pipe scheme.
@ quality | Taste and smell | 3
T Chlorine taste|Earthy or musty taste|A plastic taste from new pipes|Smells from the kitchen sink
N taste|smell|chlorine|musty taste|kitchen tap|new pipework
A run:kitchen tap|report:smell
Q chlorine taste|water tastes funny|water smell|musty taste
F If your water tastes funny, fill a jug and keep it in the fridge for a few hours.
F A musty taste after a dry summer is caused by natural compounds and is harmless.
@ moving-home | Moving home | 7
T Moving home checklist|Tell us you are moving|Moving into a new property
T Your final meter reading when you move|Moving in with a landlord|Change of address
N moving home|moving date|final bill|final meter reading|new address|change of address|tenancy
A give:final meter reading|close:account|update:new address|tell us:moving date
Q moving home|moving house|moving out|tell you i am moving|final bill|change of address|moving in
F If I am moving, do I need to tell you? Yes, please.
F Moving house or moving out of a rented flat? Tell us your moving date for a final bill.
F If you are moving in, we open an account in your name from the date you arrive.
@ moving-home | New connections | 4
T Apply for a new connection|New connection charges|Connecting a new-build home|Developer services
T Site visits for new connections
N new connection|connection application|developer|site visit|building plot|infrastructure charge
N new connection charges
A apply for:new connection|book:site visit|pay:infrastructure charge
Q new connection|apply for new connection|new connection charges|developer services
Q new build connection
F Developer services handle sites of ten homes or more.
F A new-build connection needs an approved plan before we book a site visit.
@ business | Business accounts | 5
T Business accounts|Open a business account|Your business bill explained|Trade effluent consent
T Multi-site business accounts
N business account|business bill|premises|trade effluent|retailer|multi-site account
N business charges
A open:business account|apply for:trade effluent consent|check:business charges
Q business account|business bill|open business account|trade effluent|business charges
Q business customers
F Business customers receive a business bill from their chosen retailer.
F Trade effluent from your premises needs our written consent.
@ wastewater | Wastewater services | 6
T Wastewater services|Wastewater charges explained|Wastewater flooding
T Smells from a wastewater pipe|Who owns the wastewater pipe|Wastewater treatment works
N wastewater|wastewater pipe|wastewater charges|treatment works|pumping station|wastewater flooding
N lateral drain|wastewater smell|wastewater services
A report:wastewater flooding|check:wastewater charges|report:wastewater smell
Q wastewater|wastewater charges|wastewater flooding|wastewater smell|wastewater services
Q wastewater pipe
F We own the wastewater pipe from the point where it leaves your boundary.
F Wastewater charges cover taking used water away and treating it.
@ wastewater | Blocked drains | 5
T Blocked drains|Who is responsible for a drain|Report a blocked drain|Keep your drains clear
T Manhole covers|A collapsed drain
N drain|blocked drain|manhole cover|gully|cooking fat|wet wipes|drainage|drains
A report:blocked drain|clear:drain|lift:manhole cover
Q blocked drain|drains|report blocked drain|manhole cover|drain responsibility|wet wipes
F Drain responsibility depends on whether the drain serves one property or several.
F Wet wipes and cooking fat cause most blockages.
@ help | Priority services register | 4
T Priority services register|Join the priority services register
T Extra support during an interruption|Accessible formats|The password scheme for visits
N priority services register|extra support|medical condition|accessible format|password scheme
N carer
A join:priority services register|request:accessible format|set up:password scheme
Q priority services register|priority services|extra support|medical condition water
Q password scheme
F The priority services register is free and open to anyone who needs extra support.
F If a medical condition means you depend on water, we deliver supplies during an interruption.
@ help | Complaints | 4
T Make a complaint|How we handle complaints|Escalate a complaint|Goodwill payments
T Complaint timescales
N complaint|complaint process|escalation|independent adjudicator|goodwill payment|response time
A make:complaint|escalate:complaint|request:goodwill payment
Q make a complaint|complaint|complain|complaint process|escalate complaint
F To complain, use the online form or call us; we reply within ten working days.
F You can escalate a complaint to the independent adjudicator after our final response.
@ help | Water saving tips | 4
T Water saving tips|Save water in the bathroom|Save water in the garden|Free water saving devices
T Save water and energy|Water saving for schools
N water saving|shower timer|water butt|dual flush|dripping tap|saving device|water saving tips
A order:shower timer|fix:dripping tap|fit:water butt
Q water saving tips|save water|free water saving devices|shower timer|save water garden
F Save water in the garden by watering in the evening.
F Order free water saving devices from your online account.
F A dripping tap can waste more than 5,000 litres a year.
@ news | News | 2 | news
T Mains renewal on Otter Lane starts in November 2026|New treatment works opens at Heronford
T Reservoir levels recover after autumn rain|Record investment in leak detection
T Winter ready: protect your pipes|Annual report 2026|New customer centre in Millbrook
N mains renewal|investment|treatment works|reservoir|leak detection|annual report|customer centre
N roadworks
A plan:roadworks|read:annual report
Q news|annual report|mains renewal|roadworks|leak detection
F This news item was published by the Kestrel Valley Water press office.
F Roadworks for the mains renewal will be phased to keep roads open.
"""

SENTENCES = [
    "You can {v} your {n} online, by phone or by post.",
    "Most customers {v} their {n} in a few minutes using the online account.",
    "If your {n} looks wrong, contact us and we will check it within {d} working days.",
    "We will never ask you to {v} your {n} through a third party.",
    "Before you call, have your account number and details of your {n} ready.",
    "Your {n} depends on the {m} at your property.",
    "Keep a note of the {n} and the date, as it helps our team to {v} it faster.",
    "Our advisers can explain how the {n} affects your {m}.",
    "When we receive your {n}, we send a confirmation by email or letter.",
    "Some customers find it easier to {v} the {n} with help from a family member.",
    "If you rent your home, your landlord may be responsible for the {n}.",
    "Changes to your {n} usually show on your next bill.",
    "We aim to answer questions about the {n} within {d} working days.",
    "In an emergency, call our 24-hour line and we will {v} the {n} as a priority.",
    "In a flat or shared building, the {n} and the {m} may be shared with neighbours.",
    "Read the guidance below to understand the {n} and the {m}.",
    "There is no charge to {v} your {n}.",
    "If you are unsure about the {n}, a short call usually sorts it out.",
    "We publish updates about the {n} on this site and by text message.",
    "Our field teams check the {n} and the {m} when they visit.",
    "You do not need to be at home for us to check the {n}.",
    "Please allow {d} working days for the {n} to be updated.",
    "The {n} is explained in plain terms on the back of each letter we send.",
    "Customers who need extra support can ask us to {v} the {n} for them.",
    "What happens next depends on the {n}, so tell us as much as you can.",
    "A member of our team can talk you through the {n} step by step.",
    "If the {n} changes, we write to you at least {d} weeks before.",
    "For most homes the {n} is straightforward, but older properties can differ.",
    "If you prefer, a relative or carer can {v} the {n} on your behalf.",
    "You will find the {n} listed alongside the {m} in your online account.",
    "Photos help us to understand the {n} quickly.",
    "We record every call about the {n} so that nothing is missed.",
    "Ask for a call back if you would rather talk about the {n} later.",
    "You can {v} the {n} yourself, or we can arrange it for you.",
]
NEWS_SENTENCES = [
    "Work on the {n} is part of our five-year investment plan.",
    "Residents near the {n} will receive a letter {d} days before work starts.",
    "Our project team will {v} the {n} in stages to limit disruption.",
    "The {n} is expected to be complete by spring 2027.",
    "A spokesperson said the {n} would benefit thousands of customers.",
    "Updates on the {n} and the {m} are posted here every Friday.",
    "The {n} follows feedback from customers across the valley.",
    "We thank residents for their patience while we {v} the {n}.",
    "Local councillors welcomed the {n} at a meeting last week.",
    "The {n} will be reviewed by our board in {d} months.",
]
REPORT_SENTENCES = [
    "Samples for the {n} were taken at customer taps across the zone.",
    "Every result for the {n} met the drinking water standard.",
    "Customers can {v} the {n} for any postcode in the zone.",
    "The {n} is compared with the {m} from the previous year.",
    "Results for the {n} are checked by an accredited laboratory.",
    "Where a result for the {n} fell outside the standard, we resampled within {d} days.",
    "The {n} and the {m} are published each spring.",
    "Our scientists {v} the {n} every week at the treatment works.",
]
# fmt: off
NEWS_HEADINGS = ["What is happening", "Why the work matters", "What it means for you",
                 "Timeline", "Find out more"]
REPORT_HEADINGS = ["Summary", "Sampling in the zone", "Results by parameter",
                   "What this means for you", "Contact and further information"]
HEADINGS = [
    "How do I {v} my {n}?", "About the {n}", "Before you start", "Who is responsible for the {n}",
    "What we will do", "If something goes wrong", "Help and support", "When to contact us",
    "Costs and timescales", "What you need to know about the {n}",
]
NAV = [("Billing", "billing"), ("Meters", "meters"), ("Leaks", "leaks"), ("Supply", "supply"),
       ("Water quality", "quality"), ("Moving home", "moving-home"), ("Business", "business"),
       ("Wastewater", "wastewater"), ("Help", "help"), ("News", "news")]
FOOTER = (
    "<footer>\n<p>Kestrel Valley Water Ltd, registered office: Heron House, 4 Millrace Road, "
    "Kestrel Valley KV4 7QT. Registered in England and Wales, company number 09876543.</p>\n"
    "<p>Calls to 0808 157 0123 are free from landlines and mobiles. Lines are open 8am to 8pm, "
    'Monday to Saturday.</p>\n<ul><li><a href="/privacy">Privacy notice</a></li>'
    '<li><a href="/cookies">Cookies</a></li><li><a href="/accessibility">Accessibility</a>'
    '</li><li><a href="/terms">Terms of use</a></li></ul>\n<p>&copy; 2026 Kestrel Valley Water '
    "Ltd. All rights reserved.</p>\n</footer>"
)

# Failure families as (what users type, what the site says); earlier pairs get more volume.
# Misspellings on purpose; the trailing comments keep codespell quiet.
SPELLING = [("recieve", "receive"), ("meeter", "meter"),  # codespell:ignore
            ("hardnes", "hardness"), ("dirct", "direct"),  # codespell:ignore
            ("paymnet", "payment"), ("presure", "pressure"), ("leek", "leak"),  # codespell:ignore
            ("accont", "account"), ("discolored", "discoloured"),  # codespell:ignore
            ("readng", "reading"), ("stopcok", "stopcock"), ("complant", "complaint")]
SYNONYM = [("sewer", "wastewater"), ("invoice", "bill"), ("outage", "interruption"),
           ("tariff", "charges"), ("sewage", "wastewater"), ("cutoff", "interruption"),
           ("hosepipe ban", "temporary use restriction")]
PHRASE_TRUTH = {"hosepipe ban": ("hosepipe", "restriction")}  # phrase rule, term-level truth
VARIANT = [("smartmeter", "smart meter"), ("standpipes", "standpipe"),
           ("prepayment", "pre-payment"), ("ebill", "e-bill"), ("stopcocks", "stopcock"),
           ("watermain", "water main")]
DEPLOYED = {"spelling": ["recieve", "meeter", "hardnes"],  # codespell:ignore
            "synonym": ["sewer", "invoice", "outage"], "variant": ["smartmeter", "standpipes"]}
GAPS = {
    "solar panels": "solar panels|solar panel water|solar panels grant",
    "swimming pool filling": "swimming pool filling|fill swimming pool|pool filling",
    "rainwater harvesting": "rainwater harvesting|rainwater tank",
    "fluoride": "fluoride|fluoride in water|is there fluoride in my water",
    "water softener installer": "water softener installer|softener installation|water softener",
    "bottled water delivery": "bottled water delivery|bottled water",
    "private borehole": "borehole|private borehole|borehole water testing",
}
GAP_WORDS = ["solar", "panel", "panels", "swimming", "pool", "rainwater", "harvesting",
             "fluoride", "softener", "installer", "bottled", "delivery", "borehole"]
LOW_WORDS = ["bitcoin", "cryptocurrency", "android", "insurance", "bluetooth", "washer"]
LOW_MATCH = ["water bill bitcoin", "pay bill cryptocurrency", "meter reading android",
             "leak insurance", "smart meter bluetooth", "pressure washer"]
BROAD = ["water", "help", "contact", "account", "services"]
HOSTILE = ["<script>alert(1)</script>", "<img src=x onerror=alert(1)>",
           '=HYPERLINK("http://example.com","x")', "+cmd", "@SUM(1+1)"]
NOT_PII_QUERIES = ["KV-2210-45", "meter KV-2210-45", "KV-3104-12", "smart meter app v2.3", "v2.3",
                   "water quality report 2025", "charges 2026"]
NOT_PII = ["KV-2210-45", "KV-3104-12", "v2.3", "2025", "2026"]
FIRST = ["jane", "amir", "li", "tom", "ffion", "kwame", "rosa", "dev", "mairead", "olu"]
LAST = ["doe", "khan", "wong", "baker", "evans", "mensah", "silva", "patel", "byrne", "ade"]
# Share of human searches per family (normalised); "tail" are rare page-word queries.
SHARES = {"good": 0.68, "tail": 0.15, "spelling": 0.028, "synonym": 0.032, "variant": 0.02,
          "gap": 0.026, "low": 0.008, "broad": 0.014, "pii": 0.0042, "not_pii": 0.002}
DAY_W = np.array([1.18, 1.12, 1.08, 1.05, 0.95, 0.72, 0.62])  # Monday first
HOUR_W = np.array([0.15, 0.1, 0.08, 0.08, 0.1, 0.2, 0.45, 0.9, 1.4, 1.7, 1.7, 1.6,
                   1.5, 1.5, 1.4, 1.3, 1.2, 1.1, 1.2, 1.3, 1.2, 0.9, 0.6, 0.3])
# fmt: on
TOKEN = re.compile(r"[a-z0-9]+")
STOP = {
    "a",
    "an",
    "and",
    "at",
    "by",
    "do",
    "for",
    "from",
    "how",
    "in",
    "is",
    "it",
    "of",
    "on",
    "or",
    "the",
    "to",
    "you",
    "your",
    "what",
    "when",
    "who",
    "why",
    "with",
    "after",
    "new",
}
STYLES = {
    "help": (SENTENCES, HEADINGS),
    "news": (NEWS_SENTENCES, NEWS_HEADINGS),
    "report": (REPORT_SENTENCES, REPORT_HEADINGS),
}


def tokens(text: str) -> list[str]:
    """Lowercase ``text`` and split it on non-alphanumerics (the simulated engine's analyzer)."""
    return TOKEN.findall(text.lower())


def luhn_ok(digits: str) -> bool:
    """True when the digit string passes the Luhn mod-10 check (ISO/IEC 7812-1)."""
    total = 0
    for i, ch in enumerate(reversed(digits)):
        d = int(ch) * (2 if i % 2 else 1)
        total += d - 9 if d > 9 else d
    return total % 10 == 0


def slugify(text: str) -> str:
    """File-name slug: lowercase alphanumerics joined by hyphens."""
    return "-".join(tokens(text))


@dataclass
class Page:
    """One help-centre page: where it goes, its title and its sections of paragraphs."""

    path: str
    title: str
    sections: list[tuple[str, list[str]]] = field(default_factory=list)
    keywords: list[str] = field(default_factory=list)

    def main_text(self) -> str:
        """Title and main text, the part the simulated engine indexes."""
        parts = [self.title]
        for head, paras in self.sections:
            parts += [head, *paras]
        return "\n".join(parts)

    def render(self) -> str:
        """The file content: full HTML with boilerplate, Markdown, or plain text."""
        if self.path.endswith(".md"):
            body = [f"# {self.title}", ""]
            for head, paras in self.sections:
                body += [f"## {head}", ""] + [p + "\n" for p in paras]
            return "\n".join(body)
        if self.path.endswith(".txt"):
            body = [self.title, "=" * len(self.title), ""]
            for head, paras in self.sections:
                body += [head.upper(), ""] + [p + "\n" for p in paras]
            return "\n".join(body)
        nav = "\n".join(f'<li><a href="/{d}/">{html.escape(n)}</a></li>' for n, d in NAV)
        main = [f"<h1>{html.escape(self.title)}</h1>"]
        for head, paras in self.sections:
            main.append(f"<h2>{html.escape(head)}</h2>")
            main += [f"<p>{html.escape(p)}</p>" for p in paras]
        return (
            '<!doctype html>\n<html lang="en-GB">\n<head>\n<meta charset="utf-8">\n'
            f"<title>{html.escape(self.title)} | Kestrel Valley Water help centre</title>\n"
            '</head>\n<body>\n<header>\n<a href="/" class="logo">Kestrel Valley Water</a>\n'
            f"<nav><ul>\n{nav}\n</ul></nav>\n</header>\n<main>\n"
            + "\n".join(main)
            + f"\n</main>\n{FOOTER}\n</body>\n</html>\n"
        )


@dataclass
class Topic:
    """One help-centre topic: its folder, page titles and the words its pages and users share."""

    folder: str
    name: str
    popularity: float
    style: str
    lists: dict[str, list[str]]


def parse_topics(text: str) -> list[Topic]:
    """Read ``TOPICS_TEXT``: an ``@`` header per topic, then tagged ``|``-separated lists."""
    topics: list[Topic] = []
    for line in text.strip().splitlines():
        tag, _, rest = line.partition(" ")
        if tag == "@":
            folder, name, pop, *style = (x.strip() for x in rest.split("|"))
            lists: dict[str, list[str]] = {k: [] for k in "TNAQF"}
            topics.append(Topic(folder, name, float(pop), (style or ["help"])[0], lists))
        else:
            topics[-1].lists[tag] += [x.strip() for x in rest.split("|") if x.strip()]
    return topics


TOPICS = parse_topics(TOPICS_TEXT)


def _split(field_text: str) -> list[str]:
    return [s.strip() for s in field_text.split("|") if s.strip()]


def _write_sentence(
    rng: np.random.Generator,
    nouns: list[str],
    actions: list[tuple[str, str]],
    templates: list[str],
    template: str,
    want: str | None = None,
) -> str:
    """Fill ``template``; ``want`` forces a noun, action or template containing that token."""
    with_verb = [s for s in templates if "{v}" in s]
    verb, noun = actions[rng.integers(len(actions))]
    if "{v}" not in template:
        noun = nouns[rng.integers(len(nouns))]
    if want is not None:
        hits = [a for a in actions if want in tokens(" ".join(a))]
        in_nouns = [n for n in nouns if want in tokens(n)]
        in_templates = [s for s in templates if want in tokens(s)]
        if hits:
            verb, noun = hits[rng.integers(len(hits))]
            template = with_verb[rng.integers(len(with_verb))]
        elif in_nouns:
            noun = in_nouns[rng.integers(len(in_nouns))]
        elif in_templates:
            template = in_templates[rng.integers(len(in_templates))]
        else:
            raise ValueError(f"query token {want!r} has no source in the topic vocabulary")
    other = [n for n in nouns if n != noun] or nouns
    text = template.format(
        v=verb, n=noun, m=other[rng.integers(len(other))], d=int(rng.choice([2, 3, 5, 10]))
    )
    return text[0].upper() + text[1:]


def build_pages(rng: np.random.Generator) -> list[Page]:
    """Write every topic page from its topic's vocabulary and the style's templates.

    Body length is lognormal (median 260 words, sigma 0.6) clipped to 80..900 words. The topic's
    good queries are dealt to its pages round robin, and each page gets a sentence for every
    token of its queries that it lacks, so each good query matches at least one page.
    """
    pages: list[Page] = []
    for topic in TOPICS:
        titles, all_nouns, queries, facts = (topic.lists[k] for k in "TNQF")
        actions = [tuple(a.split(":")) for a in topic.lists["A"]]
        all_nouns = list(dict.fromkeys(all_nouns + [n for _, n in actions]))
        templates, headings = STYLES[topic.style]
        for i, title in enumerate(titles):
            keep = rng.random(len(all_nouns)) < 0.65
            nouns = [n for n, k in zip(all_nouns, keep, strict=True) if k] or all_nouns[:2]
            target = int(np.clip(rng.lognormal(np.log(260), 0.6), 80, 900))
            order = [templates[j] for j in rng.permutation(len(templates))]
            sentences = [facts[j] for j in rng.permutation(len(facts))]
            while sum(len(s.split()) for s in sentences) < target:
                tpl = order[len(sentences) % len(order)]
                sentences.append(_write_sentence(rng, nouns, actions, templates, tpl))
            verb, noun = actions[rng.integers(len(actions))]
            first = headings[0].format(v=verb, n=noun)
            need = {t for q in queries[i :: len(titles)] for t in tokens(q)}
            have = set(tokens(" ".join([title, first, *sentences])))
            for tok in sorted(need - have):
                tpl = order[len(sentences) % len(order)]
                sentences.append(_write_sentence(rng, all_nouns, actions, templates, tpl, tok))
            n_sec = int(np.clip(round(len(sentences) / 6), 2, min(6, len(headings))))
            cuts = np.array_split(np.arange(len(sentences)), n_sec)
            heads = [first] + [
                headings[k].format(v=verb, n=nouns[rng.integers(len(nouns))])
                for k in rng.choice(np.arange(1, len(headings)), n_sec - 1, replace=False)
            ]
            page = Page(f"{topic.folder}/{slugify(title)}.html", title)
            for head, idx in zip(heads, cuts, strict=True):
                sents = [sentences[j] for j in idx]
                paras = [" ".join(sents[k : k + 3]) for k in range(0, len(sents), 3)]
                page.sections.append((head[0].upper() + head[1:], paras))
            words = set(tokens(" ".join([title, *all_nouns]))) & set(tokens(page.main_text()))
            page.keywords = sorted(w for w in words - STOP if len(w) > 2 and not w.isdigit())
            pages.append(page)
    # About 15 Markdown pages (all news plus a sample) and 5 plain-text quality reports.
    n_news = sum(p.path.startswith("news/") for p in pages)
    others = [i for i, p in enumerate(pages) if not p.path.startswith(("news/", "quality/water-q"))]
    md = set(rng.choice(others, 15 - n_news, replace=False).tolist())
    for i, p in enumerate(pages):
        if p.path.startswith("news/") or i in md:
            p.path = p.path[:-5] + ".md"
        elif p.path.startswith("quality/water-quality-report"):
            p.path = p.path[:-5] + ".txt"
    return pages


class Engine:
    """Conjunctive token matching over title plus main text, with optional rewrite rules."""

    def __init__(self, pages: list[Page]) -> None:
        self.index: dict[str, set[int]] = {}
        for i, page in enumerate(pages):
            for tok in set(tokens(page.main_text())):
                self.index.setdefault(tok, set()).add(i)
        self.cache: dict[tuple[str, bool], int] = {}

    def results(self, query: str, rules: dict[str, str] | None = None) -> int:
        """Number of pages containing every query token (after rewriting), capped at 500."""
        key = (query, rules is not None)
        if key not in self.cache:
            toks = [t for tok in tokens(query) for t in tokens((rules or {}).get(tok, tok))]
            hits = set.intersection(*(self.index.get(t, set()) for t in toks)) if toks else set()
            self.cache[key] = min(len(hits), RESULT_CAP)
        return self.cache[key]


@dataclass
class Entry:
    """A query the simulated public types: its family, weekly weight and the corrected form."""

    text: str
    family: str
    weight: float
    fix: str | None = None
    key: str | None = None


def _swap(query: str, site: str, user: str) -> str | None:
    """Replace the whole-word site phrase in ``query`` with the user's phrase, if present."""
    pattern = rf"(?<![\w-]){re.escape(site)}(?![\w-])"
    return re.sub(pattern, user, query) if re.search(pattern, query) else None


def build_catalogue() -> dict[str, list[Entry]]:
    """Queries by family with weights; failures derive from good queries by one swap."""
    cat: dict[str, list[Entry]] = {f: [] for f in SHARES}
    for topic in TOPICS:
        for j, q in enumerate(topic.lists["Q"]):
            cat["good"].append(Entry(q, "good", topic.popularity**1.8 / (j + 1) ** 1.2))
    for family, rules in (("spelling", SPELLING), ("synonym", SYNONYM), ("variant", VARIANT)):
        for r, (user, site) in enumerate(rules):
            key = PHRASE_TRUTH.get(user, (user, site))[0]
            made = [(_swap(g.text, site, user), g) for g in cat["good"]]
            made = [(t, g) for t, g in made if t]
            if not made:
                raise ValueError(f"{family} rule {user!r}: no good query contains {site!r}")
            total = sum(g.weight for _, g in made)
            for t, g in made:
                w = g.weight / total / (r + 1) ** 0.6
                cat[family].append(Entry(t, family, w, fix=g.text, key=key))
    for g, (topic, phrasings) in enumerate(GAPS.items()):
        for j, q in enumerate(_split(phrasings)):
            cat["gap"].append(Entry(q, "gap", 1 / (g + 1) ** 0.5 / (j + 1), key=topic))
    cat["low"] = [Entry(q, "low", 1 / (j + 1) ** 0.5) for j, q in enumerate(LOW_MATCH)]
    cat["broad"] = [Entry(q, "broad", 1 / (j + 1)) for j, q in enumerate(BROAD)]
    return cat


def typo(rng: np.random.Generator, word: str) -> str:
    """One random keyboard slip: drop, double, swap or replace a letter (not the first)."""
    i = int(rng.integers(1, len(word)))
    op = int(rng.integers(4))
    if op == 0:
        return word[:i] + word[i + 1 :]
    if op == 1:
        return word[:i] + word[i] + word[i:]
    if op == 2 and i < len(word) - 1:
        return word[:i] + word[i + 1] + word[i] + word[i + 2 :]
    return word[:i] + "aeiourstnl"[rng.integers(10)] + word[i + 1 :]


class Simulator:
    """Draws sessions of searches and keeps the ground truth it creates on the way."""

    def __init__(self, rng: np.random.Generator, pages: list[Page], engine: Engine) -> None:
        self.rng, self.pages, self.engine = rng, pages, engine
        self.cat = build_catalogue()
        self.family_p = np.array(list(SHARES.values())) / sum(SHARES.values())
        self.entry_p = {
            f: np.array([e.weight for e in es]) / sum(e.weight for e in es)
            for f, es in self.cat.items()
            if es
        }
        self.vocab = sorted(engine.index)
        self.site_tokens = set(tokens(" ".join(p.render() for p in pages)))
        self.rules = {
            u: s
            for fam in DEPLOYED.values()
            for u, s in dict(SPELLING + SYNONYM + VARIANT).items()
            if u in fam
        }
        self.tail_typos: dict[str, str] = {}
        self.truth_terms = {PHRASE_TRUTH.get(u, (u, s))[0] for u, s in SPELLING + SYNONYM + VARIANT}
        self.pii: dict[str, list[str]] = {"emails": [], "phones": [], "cards": [], "ips": []}
        self.accounts: list[str] = []

    def tail_entry(self) -> Entry:
        """A rare query from one page's words; one in twelve carries a one-off typo."""
        words = self.pages[self.rng.integers(len(self.pages))].keywords
        n = min(len(words), int(self.rng.choice([1, 2, 3], p=[0.3, 0.5, 0.2])))
        q = " ".join(words[k] for k in self.rng.choice(len(words), n, replace=False))
        if self.rng.random() < 1 / 12 and max(len(w) for w in q.split()) > 3:
            parts = q.split()
            k = max(range(len(parts)), key=lambda j: len(parts[j]))
            word, bad = parts[k], typo(self.rng, parts[k])
            if bad not in self.site_tokens and bad not in self.truth_terms:
                self.tail_typos.setdefault(bad, word)
                parts[k] = bad
                return Entry(" ".join(parts), "spelling", 0, fix=q, key=bad)
        return Entry(q, "tail", 0)

    def pii_entry(self, week: int) -> Entry:
        """A search where someone typed personal data (reserved ranges only)."""
        rng = self.rng
        kind = rng.choice(["emails", "phones", "cards", "ips"], p=[0.35, 0.3, 0.2, 0.15])
        n3 = f"{rng.integers(1000):03d}"
        if kind == "emails":
            value = (
                f"{FIRST[rng.integers(10)]}.{LAST[rng.integers(10)]}"
                f"@example.{'com' if rng.random() < 0.7 else 'org'}"
            )
            form = ["{x}", "my email is {x}", "{x} bill", "contact {x}"]
        elif kind == "phones":
            value = [f"+44 20 7946 0{n3}", f"020 7946 0{n3}", f"07700 900{n3}"][rng.integers(3)]
            form = ["{x}", "call me on {x}", "leak call {x}"]
        elif kind == "cards":
            if rng.random() < 0.4:
                digits = ["4111111111111111", "5555555555554444"][rng.integers(2)]
            else:
                body = "4" + "".join(str(d) for d in rng.integers(0, 10, 14))
                digits = body + next(c for c in "0123456789" if luhn_ok(body + c))
            sep = [" ", "-", ""][rng.integers(3)]
            value = sep.join(digits[k : k + 4] for k in range(0, 16, 4))
            form = ["{x}", "pay bill card {x}", "card {x} declined"]
        else:
            net = ["192.0.2", "198.51.100", "203.0.113"][rng.integers(3)]
            value = f"{net}.{rng.integers(1, 255)}"
            if week == 46 and not any(":" in ip for ip in self.pii["ips"]):
                value = "2001:db8::8a2e:370:7334"
            form = ["{x}", "site blocked {x}", "ip {x}"]
        self.pii[str(kind)].append(value)
        return Entry(form[rng.integers(len(form))].format(x=value), "pii", 0)

    def not_pii_entry(self) -> Entry:
        """Numbers that look sensitive but are not: part codes, versions, years, bad accounts."""
        if self.rng.random() < 0.6:
            return Entry(NOT_PII_QUERIES[self.rng.integers(len(NOT_PII_QUERIES))], "not_pii", 0)
        digits = "".join(str(d) for d in self.rng.integers(0, 10, 8))
        if luhn_ok(digits):
            digits = digits[:-1] + str((int(digits[-1]) + 1) % 10)
        self.accounts.append(digits)
        return Entry(f"account {digits}", "not_pii", 0)

    def draw(self, week: int) -> Entry:
        """One search intent from the family mix."""
        family = list(SHARES)[self.rng.choice(len(SHARES), p=self.family_p)]
        if family == "tail":
            return self.tail_entry()
        if family == "pii":
            return self.pii_entry(week)
        if family == "not_pii":
            return self.not_pii_entry()
        es = self.cat[family]
        return es[self.rng.choice(len(es), p=self.entry_p[family])]

    def search(
        self, t: float, visitor: str, e: Entry, after: bool, force_click: bool = False
    ) -> tuple:
        """One log row: engine results, then clicks from the served/not-served probabilities."""
        hits = self.engine.results(e.text, self.rules if after else None)
        served = e.family not in ("gap", "low", "broad", "pii", "hostile", "bot")
        p = 0.0 if hits == 0 or e.family == "bot" else (0.65 if served else 0.08)
        clicks = 0
        if force_click or self.rng.random() < p:
            clicks = 1 + int(self.rng.random() < 0.2) + int(self.rng.random() < 0.05)
        return (t, visitor, e.text, hits, clicks, e.family, e.key)

    def session(self, t0: float, visitor: str, week: int, after: bool) -> list[tuple]:
        """1 to 6 searches, 5 to 600 s apart (5 s plus lognormal, median 30 s).

        A failed search with a known fix is reformulated with probability 0.55, 10 to 120 s
        later, with the site's own term; the reformulation always gets a click.
        """
        n = int(self.rng.choice(6, p=[0.42, 0.26, 0.14, 0.09, 0.06, 0.03])) + 1
        rows, t = [], t0
        while len(rows) < n:
            e = self.draw(week)
            rows.append(self.search(t, visitor, e, after))
            if e.fix and rows[-1][3] == 0 and len(rows) < 6 and self.rng.random() < 0.55:
                t += float(self.rng.uniform(10, 120))
                rows.append(self.search(t, visitor, Entry(e.fix, "reformulation", 0), after, True))
            t += float(np.clip(5 + self.rng.lognormal(np.log(30), 1.0), 5, 600))
        return rows

    def start_time(self, week0: float) -> float:
        """Session start: weekday and hour-of-day weights, uniform within the hour."""
        day = self.rng.choice(7, p=DAY_W / DAY_W.sum())
        hour = self.rng.choice(24, p=HOUR_W / HOUR_W.sum())
        return week0 + day * 86400 + hour * 3600 + float(self.rng.uniform(0, 3600))

    def visitor_id(self) -> str:
        """Random opaque visitor id, 12 characters."""
        return "".join(
            np.array(list("abcdefghjkmnpqrstuvwxyz23456789"))[self.rng.integers(0, 31, 12)]
        )

    def bot(self, week: int, week0: float, after: bool) -> tuple[str, list[tuple]]:
        """A scraper: 250 to 420 searches at 0.5 to 3 s intervals within one hour.

        Week 45 random site words, week 46 an alphabetical walk, week 47 random one or two words.
        """
        visitor, n = self.visitor_id(), int(self.rng.integers(250, 420))
        t = self.start_time(week0)
        start = int(self.rng.integers(len(self.vocab)))
        rows = []
        for k in range(n):
            if week == 45:
                q = self.vocab[self.rng.integers(len(self.vocab))]
            elif week == 46:
                q = self.vocab[(start + k) % len(self.vocab)]
            else:
                pick = self.rng.integers(0, len(self.vocab), int(self.rng.integers(1, 3)))
                q = " ".join(self.vocab[j] for j in pick)
            rows.append(self.search(t, visitor, Entry(q, "bot", 0), after))
            t += float(self.rng.uniform(0.5, 3.0))
        return visitor, rows

    def week(self, week: int, returning: list[str]) -> tuple[list[tuple], str]:
        """All rows of one ISO week, sorted by time; also returns the bot's visitor id."""
        week0 = datetime.fromisoformat(WEEK_STARTS[week] + "T00:00:00+00:00").timestamp()
        after = week0 >= datetime.fromisoformat(CHANGE_AT).timestamp()
        bot_id, rows = self.bot(week, week0, after)
        rows += [
            self.search(self.start_time(week0), self.visitor_id(), Entry(h, "hostile", 0), after)
            for h in HOSTILE
        ]
        human = 0
        while human < HUMAN_TARGET[week]:
            old = returning and self.rng.random() < 0.08
            visitor = returning[self.rng.integers(len(returning))] if old else self.visitor_id()
            returning.append(visitor)
            t = self.start_time(week0)
            for _ in range(1 + int(self.rng.random() < 0.15) + int(self.rng.random() < 0.05)):
                if t >= week0 + 7 * 86400 - 3600:
                    break
                s = self.session(t, visitor, week, after)
                rows += s
                human += len(s)
                t = s[-1][0] + float(self.rng.uniform(2, 72)) * 3600
        rows = [r for r in rows if r[0] < week0 + 7 * 86400]
        rows.sort(key=lambda r: (r[0], r[1]))
        return rows, bot_id


def iso(t: float, zulu: bool, millis: bool) -> str:
    """ISO 8601 UTC timestamp, seconds or milliseconds, with ``Z`` or ``+00:00``."""
    spec = "milliseconds" if millis else "seconds"
    stamp = datetime.fromtimestamp(t, UTC).isoformat(timespec=spec)
    return stamp.replace("+00:00", "Z") if zulu else stamp


def write_logs(rows_by_week: dict[int, list[tuple]]) -> dict[str, list[tuple]]:
    """Week 45 and 47 as CSV, week 46 as gzip JSON Lines with other field names."""
    files = {}
    for week, rows in rows_by_week.items():
        if week == 46:
            name = "searches-2026-w46.jsonl.gz"
            with open(OUT / name, "wb") as raw, gzip.GzipFile("", "wb", 9, raw, mtime=0) as gz:
                for t, v, q, hits, clicks, *_ in rows:
                    rec = {
                        "time": iso(t, True, True),
                        "visitor": v,
                        "search_term": q,
                        "hits": hits,
                        "clicked": clicks,
                    }
                    gz.write((json.dumps(rec, ensure_ascii=False) + "\n").encode())
        else:
            name = f"searches-2026-w{week}.csv"
            with open(OUT / name, "w", newline="", encoding="utf-8") as fh:
                out = csv.writer(fh, lineterminator="\n")
                out.writerow(["timestamp", "visitor_id", "query", "results", "clicks"])
                out.writerows((iso(r[0], False, False), *r[1:5]) for r in rows)
        files[name] = rows
    return files


def check_vocabulary(pages: list[Page], engine: Engine) -> None:
    """Fail loudly if a user-side truth term occurs anywhere in the site, or a site term does not.

    Raises
    ------
    ValueError
        Naming the term and the rule it belongs to.
    """
    site_all = set(tokens(" ".join(p.render() for p in pages)))
    text_all = " ".join(p.main_text() for p in pages).lower()
    absent = [t for u, _ in SPELLING + SYNONYM + VARIANT for t in tokens(u)]
    absent += GAP_WORDS + LOW_WORDS + ["ban"]
    for term in absent:
        if term in site_all:
            raise ValueError(f"user term {term!r} occurs in the site content")
    joined = f" {' '.join(tokens(text_all))} "
    for _u, site in SPELLING + SYNONYM + VARIANT:
        if site not in text_all or f" {' '.join(tokens(site))} " not in joined:
            raise ValueError(f"site term {site!r} does not occur in the site content")
    for query in [q for v in GAPS.values() for q in _split(v)] + LOW_MATCH:
        if engine.results(query) != 0:
            raise ValueError(f"gap or low-match query {query!r} matches a page")


def build_truth(
    sim: Simulator, pages: list[Page], bots: dict[int, str], files: dict[str, list[tuple]]
) -> dict:
    """Everything a test needs to check querygap against the scenario (see README.md)."""
    good = {}
    for rows in files.values():
        for r in rows:
            if r[5] == "good":
                good[r[2]] = good.get(r[2], 0) + 1
    pairs = {"spelling": dict(SPELLING), "synonym": dict(SYNONYM), "variant": dict(VARIANT)}
    truth_pairs = {
        f: dict(PHRASE_TRUTH.get(u, (u, s)) for u, s in p.items()) for f, p in pairs.items()
    }
    deployed = {f: {k: truth_pairs[f][k] for k in ks} for f, ks in DEPLOYED.items()}
    volumes = {}
    for name, rows in files.items():
        fam: dict[str, int] = {}
        for r in rows:
            fam[r[5]] = fam.get(r[5], 0) + 1
        volumes[name] = dict(sorted(fam.items()))
    truth = {
        "scenario": "Kestrel Valley Water (fictional regional water utility) help-centre search",
        "seed": SEED,
        "weeks": [f"2026-W{w}" for w in WEEK_STARTS],
        "change_at": CHANGE_AT,
        "session_gap_minutes": 30,
        "site_pages": len(pages),
        "spelling": {**truth_pairs["spelling"], **dict(sorted(sim.tail_typos.items()))},
        "spelling_frequent": list(truth_pairs["spelling"]),
        "synonym": truth_pairs["synonym"],
        "synonym_phrases": {u: s for u, s in SYNONYM if " " in u},
        "variant": truth_pairs["variant"],
        "content_gap": list(GAPS),
        "content_gap_queries": {k: _split(v) for k, v in GAPS.items()},
        "good_queries": [q for q, _ in sorted(good.items(), key=lambda kv: (-kv[1], kv[0]))[:40]],
        "low_match": LOW_MATCH,
        "broad_queries": BROAD,
        "bot_visitors": list(bots.values()),
        "pii": {k: sorted(set(v)) for k, v in sim.pii.items()},
        "not_pii": NOT_PII + sorted(set(sim.accounts)),
        "hostile": HOSTILE,
        "deployed_in_w47": deployed,
        "deployed_rules_engine": sim.rules,
        "not_deployed": {
            f: {k: v for k, v in p.items() if k not in deployed[f]} for f, p in truth_pairs.items()
        },
        "row_counts": {n: len(rows) for n, rows in files.items()},
        "zero_result_share": {
            n: round(sum(r[3] == 0 for r in rows) / len(rows), 4) for n, rows in files.items()
        },
        "family_volumes": volumes,
    }
    return truth


def main() -> None:
    """Write demo_logs/site/, the three weekly logs and truth.json."""
    rng = np.random.default_rng(SEED)
    pages = build_pages(rng)
    engine = Engine(pages)
    check_vocabulary(pages, engine)
    shutil.rmtree(OUT / "site", ignore_errors=True)
    for page in pages:
        path = OUT / "site" / page.path
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(page.render(), encoding="utf-8")
    sim = Simulator(rng, pages, engine)
    for e in sim.cat["good"]:
        if engine.results(e.text) == 0:
            raise ValueError(f"good query {e.text!r} matches no page")
    returning: list[str] = []
    weeks = {w: sim.week(w, returning) for w in WEEK_STARTS}
    files = write_logs({w: rows for w, (rows, _) in weeks.items()})
    truth = build_truth(sim, pages, {w: bot for w, (_, bot) in weeks.items()}, files)
    (OUT / "truth.json").write_text(json.dumps(truth, indent=2) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
