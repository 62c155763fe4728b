#!/usr/bin/env python3
"""Generate the Loomhaven demo data set: an invented post history with known effects.

Everything here is made up: "Loomhaven Botanic Garden" and its three accounts are fictional,
and links use the reserved .example domain. The effects planted below are documented in
README.md and written to effects.json, so tests can check that the tool recovers them.

Usage:  python demo_data/generate.py [OUTPUT_DIR]     (default: this script's directory)
Same seed, same numpy -> byte-identical files.
"""
import csv
import difflib
import json
import re
import sys
from datetime import date, datetime, timedelta, timezone
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np

SEED = 20250501
START, END = date(2025, 5, 1), date(2026, 10, 31)  # inclusive, local calendar dates

ACCOUNTS = {  # n_posts includes the planted repeats posted by that account
    "loomhaven": dict(display_name="Loomhaven Botanic Garden", zone="Europe/London",
                      prefix="lh", n_posts=1500, base=7.60),
    "loomhaven_events": dict(display_name="Loomhaven Events", zone="Europe/London",
                             prefix="lhe", n_posts=900, base=7.05),
    "loomhaven_lab": dict(display_name="Loomhaven Plant Lab", zone="America/New_York",
                          prefix="lhl", n_posts=600, base=6.70),
}

# Topic effects on log(impressions); strongest first. Spread strongest-weakest = 0.80.
TOPIC_EFFECT = {"blooms": 0.40, "behind_the_scenes": 0.24, "events": 0.08,
                "plant_science": -0.08, "volunteering": -0.24, "shop_membership": -0.40}
TOPICS = list(TOPIC_EFFECT)
# Account topic mixes are tilted only mildly, so raw per-topic medians keep the true order.
TOPIC_MIX = {
    "loomhaven":        [0.24, 0.20, 0.15, 0.14, 0.13, 0.14],
    "loomhaven_events": [0.18, 0.16, 0.24, 0.12, 0.15, 0.15],
    "loomhaven_lab":    [0.17, 0.16, 0.14, 0.20, 0.16, 0.17],
}
ENGAGEMENT_RATE = {"blooms": 0.045, "behind_the_scenes": 0.035, "events": 0.025,
                   "plant_science": 0.030, "volunteering": 0.020, "shop_membership": 0.012}
ENGAGEMENT_RATE_SD = 0.20  # per-post log-normal wobble of the rate

LINK, MEDIA, WEEKEND, TREND_PER_YEAR, NOISE_SD = -0.35, 0.20, 0.10, 0.20, 0.45
# Link and media are drawn independently of topic/account/hour so that simple
# with/without splits measure their effect without confounding.
P_LINK, P_MEDIA = 0.35, 0.45


def _hour_curve():
    """Two circular bumps (midday 12.5h, evening 19h) over a night floor; max set to 0."""
    h = np.arange(24)
    def bump(c, w):
        d = np.minimum(abs(h - c), 24 - abs(h - c))
        return np.exp(-d ** 2 / (2 * w ** 2))
    curve = 0.70 * bump(12.5, 2.2) + 0.60 * bump(19.0, 1.6)
    return [round(float(v), 2) + 0.0 for v in curve - curve.max()]  # + 0.0: no "-0.0"


HOUR_EFFECT = _hour_curve()
# When the team posts (local hour). Mostly 7-22h, a thin tail at night so the night
# penalty is still estimable.
HOUR_WEIGHT = [0.4, 0.3, 0.25, 0.25, 0.25, 0.35, 0.7, 1.5, 2.5, 3, 3, 3,
               3, 3, 2.5, 2.5, 2.5, 3, 3, 3, 2.5, 2, 1.5, 0.8]
WEEKEND_POSTING = 0.6  # fewer posts on Sat/Sun (posting volume, not reach)

ENGAGEMENT_SPLIT = {  # shares of engagements; "other" (saves, expands) is not a column
    "no_link": dict(likes=0.72, reposts=0.13, replies=0.07, link_clicks=0.00, profile_clicks=0.03),
    "link":    dict(likes=0.55, reposts=0.10, replies=0.05, link_clicks=0.22, profile_clicks=0.03),
}
REPEATS = {"same_account": {"loomhaven": 20, "loomhaven_events": 12, "loomhaven_lab": 8},
           # (reposter, original account, count): the main account is amplified most
           "teammate": [("loomhaven_events", "loomhaven", 7), ("loomhaven_lab", "loomhaven", 4),
                        ("loomhaven", "loomhaven_events", 2), ("loomhaven", "loomhaven_lab", 2)]}
# Token-level difflib ratio caps between two ordinary same-topic posts (any account).
# Planted repeats sit above 0.85, so there is a clear gap.
CAP_30_DAYS, CAP_EVER = 0.60, 0.80

TOPIC_PHRASES = {
    "blooms": ["flowers in bloom", "what's flowering now", "seasonal blooms", "garden in flower",
               "spring flowers", "flower report"],
    "behind_the_scenes": ["behind the scenes", "gardeners at work", "glasshouse diary",
                          "what the garden team does", "nursery and potting shed"],
    "events": ["events", "tickets", "what's on", "family days out", "evening tours and workshops"],
    "plant_science": ["plant science", "lab news", "research results", "seed bank",
                      "pollinator survey"],
    "volunteering": ["volunteering", "volunteer call", "help in the garden", "join the volunteers"],
    "shop_membership": ["shop offers", "membership", "gift ideas", "discounts for members"],
}

# ---------------------------------------------------------------- text material
PLACES = ["the Long Border", "the Winter Walk", "Glasshouse One", "the Tropical House",
          "the Herb Terrace", "the Pond Walk", "the Old Orchard", "the Meadow", "the Alpine Bed",
          "the Fern Gully", "the Rose Arbour", "the South Lawn", "the Woodland Path",
          "the Walled Garden", "the Gravel Garden", "the Lower Lake", "the Bog Garden",
          "the Cedar Lawn", "the Kitchen Garden", "the Sunken Garden", "the Birch Grove"]
SEASON_PLANTS = {  # plural nouns only, so templates read correctly
    "winter": ["snowdrops", "hellebores", "witch hazels", "winter aconites", "camellias",
               "winter irises", "cyclamen", "daphnes", "orchids", "winter jasmines",
               "mahonias", "sarcococcas", "early crocuses", "viburnums", "winter honeysuckles"],
    "spring": ["magnolias", "tulips", "bluebells", "daffodils", "cherry blossoms", "fritillaries",
               "camassias", "rhododendrons", "tree peonies", "alliums", "wisterias",
               "crab apples", "primroses", "pasque flowers", "lilacs", "grape hyacinths"],
    "summer": ["roses", "foxgloves", "peonies", "lavender bushes", "water lilies", "salvias",
               "hydrangeas", "sunflowers", "agapanthus", "echinaceas", "sweet peas",
               "lilies", "delphiniums", "poppies", "cosmos", "verbenas"],
    "autumn": ["dahlias", "asters", "autumn crocuses", "nerines", "salvias", "anemones",
               "rudbeckias", "autumn cyclamen", "late roses", "gingers", "heleniums",
               "sedums", "chrysanthemums", "gentians", "colchicums", "michaelmas daisies"],
}
SEASON = {12: "winter", 1: "winter", 2: "winter", 3: "spring", 4: "spring", 5: "spring",
          6: "summer", 7: "summer", 8: "summer", 9: "autumn", 10: "autumn", 11: "autumn"}
ALL_YEAR = ("winter", "spring", "summer", "autumn")
EVENTS = {  # event -> seasons it runs in (by the event's own date), so names fit the calendar
    "the Lantern Trail": ("autumn", "winter"), "the Seed Swap Morning": ALL_YEAR,
    "the Twilight Garden Tour": ("spring", "summer", "autumn"), "the Family Bug Hunt": ("spring", "summer"),
    "the Spring Plant Fair": ("spring",), "our Botanical Drawing Class": ALL_YEAR,
    "the Dawn Chorus Walk": ("spring", "summer"), "Orchard Harvest Day": ("autumn",),
    "the Glasshouse Late": ALL_YEAR, "the Pond Dipping Morning": ("spring", "summer"),
    "our Wreath-Making Workshop": ("winter",), "the Summer Music Picnic": ("summer",),
    "the Fungi Foray": ("autumn",), "the Herb Tasting Evening": ("spring", "summer", "autumn"),
    "the Winter Solstice Walk": ("winter",), "the Rose Week Tours": ("summer",),
}

T = {  # per topic: templates + slot pools. Slots derived from the post date are added in fill().
    "blooms": dict(
        templates=[
            "{emoji} The {plant} in {place} are {state} {when}. {sense}.",
            "What's flowering now: {plant} in {place}, with {plant2} close behind. {visit}",
            "{When}, {place} belongs to the {plant}. {sense}. {emoji}",
            "Flower report {emoji} {plant} {state}, {plant2} not far off. Find them in {place}.",
            "If you only see one thing {when}, make it the {plant} in {place}. {sense}.",
            "Our {plant} have decided it's their moment: {state} across {place}. {visit} {emoji}",
            "Walked through {place} at opening time and the {plant} are {state}. {Plant2} are next.",
            "{Weekday} flower check: {place} has {plant} {state} and {plant2} just starting. {visit}",
            "It's {plant} time in {place} {emoji} {sense}.",
            "Spotted on this morning's walk: {plant} {state} by {place}, and the first {plant2} too.",
            "Colour alert {emoji} {place} is all {plant} {when}, with {plant2} filling the gaps.",
            "The gardeners' pick {when}: {plant} in {place}. {sense}. {visit}",
        ],
        state=["in full flower", "just opening", "at their peak", "putting on a show",
               "flowering their heads off", "looking their best", "coming into colour"],
        when=["this week", "this weekend", "right now", "over the next few days", "today",
              "for the next fortnight"],
        sense=["The scent is best first thing", "The bees have found them already",
               "Bring a camera", "The colour glows in low sun", "Look closely at the petals",
               "Go early for the quietest paths", "They won't last long, so don't wait",
               "Best seen from the bench at the far end"],
        visit=["Come and see them.", "Worth a detour on your visit.", "Take the long way round.",
               "Don't miss them.", "Pop by if you're passing.", "Plan your walk around them."],
        emoji=["🌸", "🌼", "🌷", "🌺", "🌻", "🐝"],
        closer=["Happy wandering.", "Tell us your favourite.", "Photos welcome!",
                "Paths are step-free all the way."],
        link_lead=["Garden map:", "What's out:", "Plan your visit:"], section="whats-flowering",
        tags=["#WhatsFlowering", "#InBloom", "#GardenWalk"]),
    "behind_the_scenes": dict(
        templates=[
            "Behind the scenes: {team} spent {time} {task}. {detail}. {emoji}",
            "{At}, {team} were {task}. {detail}.",
            "A peek into {backplace}, where {team} spent {time} {task}. {detail}. {emoji}",
            "Counting up: {n} {things} by {team} this week. {detail}.",
            "Not all gardening is pretty. {At}, {team} were {task}, and {detail_lc}.",
            "What visitors don't see: {task}. {Team} do it {freq} so {reason}.",
            "{emoji} Glasshouse diary, {weekday}: {task}, {task2}, and a lot of tea.",
            "Today's job list for {team}: {task}, then {task2}. {detail}.",
            "Early start {emoji} {team} have been {task} since {clock}. {detail}.",
            "The unseen work of {month}: {task}, {task2} and plenty more. {Team} make it look easy.",
            "Meet {team}: this week they're {task}. {detail}.",
            "Ask a gardener: why are we {task}? So {reason}. {emoji}",
        ],
        team=["our glasshouse team", "the nursery crew", "our apprentices", "the arboretum team",
              "the early shift", "the propagation team", "the path crew", "the lake team"],
        time=["the morning", "the whole week", "a very wet afternoon", "most of yesterday",
              "the first hour of the day", "two long mornings"],
        at=["Before opening", "First thing today", "On a very wet afternoon", "All week",
            "Yesterday", "At dawn", "Over the weekend"],
        task=["repotting the big palms", "pruning the wisterias", "turning the compost heaps",
              "cleaning the glasshouse panes", "lifting and dividing the asters",
              "mulching the borders", "sowing next year's annuals", "clearing the pond weed",
              "checking the boiler before the cold snap", "relabelling the fern collection",
              "moving the giant cactus (carefully)", "sharpening every pair of secateurs",
              "raking leaves off the lawns", "staking the tall perennials"],
        backplace=["the mess room", "the compost yard", "the nursery", "the potting shed", "the propagation benches", "the boiler room",
                   "the seed store", "the back of the glasshouse", "the tool store"],
        things=["pots repotted", "cuttings taken", "bulbs planted", "barrows of mulch spread",
                "labels rewritten", "seed trays sown", "trees staked"],
        detail=["It takes four people and a lot of patience", "Nothing goes to waste here",
                "The tea breaks are well earned", "Every pot gets a new label",
                "It's the least glamorous job and the most important",
                "You'd be amazed how much soil moves in a day",
                "The robins supervised closely", "Muddy boots, happy gardeners"],
        freq=["every week", "twice a year", "each autumn", "every morning", "every spring"],
        clock=["7am", "half past six", "first light", "before the gates opened", "dawn"],
        reason=["the paths stay safe", "the plants get a head start", "the glasshouse stays warm",
                "nothing outgrows its bed", "the collection stays healthy"],
        emoji=["🌱", "🪴", "🧤", "🌿", "🛠️"],
        closer=["More from the team soon.", "Questions for the gardeners? Ask below.",
                "Wave if you see us on the paths."],
        link_lead=["Read more:", "Photos:", "The full diary:"], section="blog",
        tags=["#BehindTheScenes", "#GardenTeam", "#GlasshouseDiary"]),
    "events": dict(
        templates=[
            "{emoji} {Event} is back on {date}, {time}. {ticket}.",
            "Save the date: {event}, {date}. {Audience}, and {pitch_lc}.",
            "Join us for {event} on {date} {time}. {pitch}. {ticket}.",
            "Only {days} days to go until {event}! {ticket}. {emoji}",
            "New this season: {event}, {audience}. First session {date}. {ticket}.",
            "{Event} on {date}: {pitch_lc}. {ticket}.",
            "Plans for {event_weekday}? {Event} runs {time}, {audience}. {ticket}.",
            "Thank you to everyone who came to {event2}! Next up is {event} on {date}. {ticket}.",
            "Tickets for {event} on {date} go fast. {Audience}. {pitch}.",
            "Calling all garden lovers: {event}, {date}, {time}. {pitch}.",
            "Coming soon {emoji} {event} ({date}). {ticket}, {audience}.",
            "Mark your calendar {emoji} {date}, {time}: {event}. {pitch}.",
        ],
        time=["from 10am", "at 6pm", "7-9pm", "all day", "from 2pm", "10am-1pm", "after dark"],
        ticket=["Tickets are on sale now", "Booking is open", "Spaces are limited",
                "Free with garden entry", "Members go free", "Last few places left",
                "Pay what you can"],
        audience=["for all ages", "for families", "for adults", "for beginners", "for keen growers",
                  "for curious kids"],
        pitch=["Bring a friend", "Expect music and hot drinks", "Come hungry",
               "Bring your own sketchbook", "Little ones welcome", "Wear boots you can get muddy",
               "Dress for the weather"],
        emoji=["🎟️", "📅", "🎶", "🏮", "✨"],
        closer=["See you there!", "Accessible routes throughout.", "Rain or shine."],
        link_lead=["Tickets:", "Book here:", "Details:"], section="events",
        tags=["#WhatsOn", "#GardenEvents", "#FamilyDayOut"]),
    "plant_science": dict(
        templates=[
            "Lab update {emoji} {Study}: {finding}. {method}.",
            "From the lab bench: {finding}. That's the early signal from {study}. {next}.",
            "{n} samples, {m} species, one very cold freezer: {study} in numbers. {next}.",
            "Science at Loomhaven: {study} shows {finding}. {method}.",
            "Small result, big smile: {finding}. {next}. {emoji}",
            "Why keep records for decades? Because {study} now shows {finding}.",
            "Field notes, {month}: {finding}. {method}. {next}.",
            "{emoji} New lab notes on what {study} is telling us. Short version: {finding}.",
            "Data day in the lab {emoji} {Study} update: {finding}.",
            "We counted, measured and checked again: {finding}. {method}.",
            "One for the plant nerds: {study} found that {finding}. {next}.",
            "Halfway through {study} and one thing stands out {emoji} {finding}. {next}.",
        ],
        findings={  # study -> what it found, so each post's result fits its study
            "our seed bank": ["germination rates are up on last year",
                              "seeds banked in 1998 still sprout happily",
                              "the cold room now holds over a hundred new wild collections"],
            "the pollinator survey": ["bees prefer open-faced flowers by a wide margin",
                                      "hoverflies outnumber bees on the umbellifers",
                                      "the meadow edge is busier than the middle"],
            "the drought-tolerance trial": ["deep-rooted grasses barely noticed the dry spell",
                                            "gravel-bed plants needed no watering at all",
                                            "mulched plots lost far less moisture"],
            "the herbarium scanning project": ["hundreds more specimens are now scanned and searchable",
                                               "an old label turned out to be a forgotten local record"],
            "our soil microbe study": ["healthy soil here holds a surprising mix of fungi",
                                       "no-dig beds have the richest soil life"],
            "the first-flowering record": ["flowering came days earlier than our long-term average",
                                            "early bulbs are shifting earlier decade by decade"],
            "the moss misting trial": ["moss grows twice as fast under fine mist",
                                       "rainwater beats tap water for every moss we tried"],
            "the fern spore project": ["some spores stay viable for years",
                                       "tree-fern spores sprout best in near darkness"],
            "the leaf-litter count": ["leaf litter hides more beetles than we guessed",
                                      "oak litter is busier than beech"],
            "the peat-free compost trial": ["peat-free seedlings are keeping pace",
                                            "bark-based mixes drain best for cuttings"],
        },
        method=["Each sample is counted by hand", "We log every result in an open notebook",
                "Volunteers helped with the counts", "The records go back decades",
                "Three repeats, same answer", "Methods are in the lab notes"],
        next=["Next step: repeating it in the autumn", "More results next month",
              "We'll share the full notes soon", "The next batch goes in the freezer this week",
              "Watch this space"],
        emoji=["🔬", "🧪", "📊", "🌱", "🧫"],
        closer=["Questions welcome.", "Data and methods shared openly.", "Science is a team sport."],
        link_lead=["Read more:", "Lab notes:", "Full write-up:"], section="lab/notes",
        tags=["#PlantScience", "#LabNotes", "#CitizenScience"]),
    "volunteering": dict(
        templates=[
            "We're looking for {role} {when}. {perk}. {ask}",
            "Volunteer call {emoji} {Role} needed {when}. {perk}.",
            "Huge thanks to our {role}, who gave {n} hours last month. {perk}. {ask}",
            "{ask} {Team} need a few more {role} {when}. {perk}.",
            "Volunteering here means {benefit}. We need {role} {when}. {perk}.",
            "Give a little time, grow a lot: become one of our {role}. {perk}. {ask}",
            "Could you spare a few hours {when}? {Role} help keep the garden running. {perk}.",
            "Open session for new {role} on {date}. {perk}. {ask}",
            "{Role} wanted {emoji} Join us {when}. {perk}. You'll get {benefit}.",
            "Meet the people who keep this place going: our {role}. Want to join them {when}? {perk}.",
            "Thinking of volunteering in {month}? We have spaces for {role} {when}. {ask}",
            "A big welcome to our newest {role}! There's room for more {when}. {perk}.",
        ],
        role=["garden volunteers", "weekend guides", "seed-cleaning helpers",
              "citizen-science counters", "event stewards", "nursery helpers",
              "welcome-desk volunteers", "path-tidying volunteers"],
        when=["on Tuesday mornings", "once a month", "on weekend afternoons", "this season",
              "one morning a week", "on event evenings"],
        perk=["No experience needed", "Full training given", "Tea and cake provided",
              "Gloves and tools provided", "It's a lovely way to meet people",
              "Great if you're new to the area", "Flexible hours"],
        ask=["Fancy joining us?", "Could this be you?", "Interested?", "Know someone who'd love this?",
             "Say hello at the welcome desk."],
        team=["The nursery crew", "Our guides", "The events team", "The lab team", "The path crew"],
        benefit=["fresh air and good company", "learning from the gardeners",
                 "getting your hands properly muddy", "seeing the garden before anyone else"],
        emoji=["🙌", "🧤", "🤝", "🌿"],
        closer=["Thank you, all of you.", "Every hour helps.", "All ages 16+ welcome."],
        link_lead=["Sign up:", "Details:", "Apply here:"], section="volunteer",
        tags=["#GardenVolunteers", "#Volunteering", "#GetInvolved"]),
    "shop_membership": dict(
        templates=[
            "{emoji} {offer} {item} {offer_who}. {cta}.",
            "Shop news: {item} are back in stock. {cta}.",
            "Membership tip: members get {perk}, plus {offer_lc} {item}. {cta}.",
            "Looking for a gift? {offer} {item} {offer_who}. {cta}.",
            "Members get {perk} and {perk2}. Join {offer_who}. {cta}.",
            "New in the shop: {item}. {cta}. {emoji}",
            "Last chance: {offer_lc} {item} ends {weekday}. {cta}.",
            "Every sale of {item} helps fund {cause}. {cta}.",
            "Members, this one's for you {emoji} {offer} {item} {offer_who}.",
            "Spotted in the shop this {weekday}: {item}. {cta}.",
            "Why join? {Perk}, {perk2}, and you support the garden all year. {cta}.",
            "Gift idea {emoji} {item}, {offer_lc} {offer_who}. {cta}.",
        ],
        item=["seed packets", "gift memberships", "garden tote bags", "wildflower seed mixes",
              "pressed-flower cards", "jars of orchard honey", "pollinator plant bundles",
              "garden calendars", "enamel mugs", "bulb collections", "botanical prints"],
        offer=["10% off", "15% off", "20% off", "Two for one on", "Free postcards with",
               "Half price on"],
        offer_who=["for members", "this weekend only", "until Sunday", "while stocks last",
                   "all month", "for the next week"],
        perk=["free entry all year", "early booking for events", "member-only evenings",
              "a discount in the shop and cafe", "a guest pass each season"],
        cta=["Pop into the shop by the main gate", "Grab yours on your next visit",
             "Makes a lovely gift", "Every purchase supports the garden", "Ask at the till"],
        cause=["the seed bank", "new glasshouse benches", "school visits", "the apprentice scheme"],
        emoji=["🛍️", "🎁", "💚", "🏷️"],
        closer=["Thank you for supporting us.", "Open daily until 4pm.", "Gift wrapping free."],
        link_lead=["Shop:", "Join:", "Browse:"], section="shop",
        tags=["#GardenShop", "#Membership", "#GiftIdeas"]),
}
MENTIONS = ["Thanks to @{o} for the photos.", "More from @{o} soon.", "Follow @{o} for more.",
            "With help from @{o}.", "Shout-out to @{o}.", "Cc @{o}."]
# Minor edits for planted repeats: keep the meaning, change a word or an emoji.
WORD_SWAPS = [(" this week", " these days"), (" right now", " at the moment"), ("Huge thanks", "Big thanks"),
              (" lovely ", " gorgeous "), ("!", "!!"), (" very ", " really "), ("Join us", "Come join us"),
              (" soon.", " shortly."), ("Pop by", "Drop by"), ("Don't miss them", "Do not miss them"),
              ("Booking is open", "Booking now open"), ("Fancy joining us?", "Fancy joining in?"),
              ("Watch this space", "Stay tuned"), ("Makes a lovely gift", "Makes a great gift"),
              ("Come and see them", "Come and have a look")]
PREFIXES = ["Reminder: ", "In case you missed it: ", "Still true: "]


def pick(rng, seq):
    return seq[int(rng.integers(len(seq)))]


def cap(s):
    return s[:1].upper() + s[1:]


def slug(s):
    return re.sub(r"[^a-z0-9]+", "-", s.lower()).strip("-")


def fill(rng, topic, local):
    """One post text for `topic`; slot pools plus date-derived slots (weekday, event dates)."""
    spec = T[topic]
    plants = SEASON_PLANTS[SEASON[local.month]]
    p1, p2 = rng.choice(len(plants), 2, replace=False)
    ev_day = local.date() + timedelta(days=int(rng.integers(3, 40)))
    slots = {k: pick(rng, v) for k, v in spec.items() if isinstance(v, list) and k != "templates"}
    slots.update(plant=plants[p1], plant2=plants[p2], place=pick(rng, PLACES),
                 days=(ev_day - local.date()).days,
                 date=f"{ev_day:%a} {ev_day.day} {ev_day:%B}", event_weekday=f"{ev_day:%A}",
                 weekday=f"{local:%A}", month=f"{local:%B}",
                 n=int(rng.integers(12, 480)), m=int(rng.integers(5, 90)))
    if topic == "plant_science":
        study = pick(rng, sorted(spec["findings"]))
        slots.update(study=study, finding=pick(rng, spec["findings"][study]))
    if topic == "events":  # only events that run in the season of the event date
        names = [e for e, seasons in EVENTS.items() if SEASON[ev_day.month] in seasons]
        slots.update(event=pick(rng, names), event2=pick(rng, list(EVENTS)))
    if topic == "behind_the_scenes":  # second task must differ from the first
        slots["task2"] = pick(rng, [t for t in spec["task"] if t != slots["task"]])
    if topic == "shop_membership":
        slots["perk2"] = pick(rng, [p for p in spec["perk"] if p != slots["perk"]])
    for k in list(slots):  # {Key} = capitalised, {key_lc} = lower-cased first letter
        v = str(slots[k])
        slots[cap(k)], slots[k + "_lc"] = cap(v), v[:1].lower() + v[1:]
    tid = int(rng.integers(len(spec["templates"])))
    return spec["templates"][tid].format(**slots), slots, tid


def compose(rng, topic, account, local, has_link):
    """Core sentence plus optional closer, @mention, link and hashtags; 40-260 chars."""
    spec = T[topic]
    for _ in range(50):
        core, slots, tid = fill(rng, topic, local)
        parts = [core]
        if rng.random() < 0.25:
            parts.append(pick(rng, spec["closer"]))
        if rng.random() < 0.15:
            parts.append(pick(rng, MENTIONS).format(o=pick(rng, [a for a in ACCOUNTS if a != account])))
        if has_link:  # a specific, varied path under the reserved .example domain
            key = {"events": "event", "volunteering": "role", "shop_membership": "item",
                   "plant_science": "study", "behind_the_scenes": "task"}.get(topic, "plant")
            parts.append(f"{pick(rng, spec['link_lead'])} https://loomhaven.example/{spec['section']}/"
                         f"{local:%Y-%m}-{slug(str(slots[key]))}")
        if rng.random() < 0.40:
            k = int(rng.integers(1, 3))
            parts.append(" ".join(list(rng.choice(spec["tags"], k, replace=False))
                                  + (["#Loomhaven"] if rng.random() < 0.3 else [])))
        text = " ".join(parts)
        if 40 <= len(text) <= 260:
            return text, tid
    raise RuntimeError("could not compose a text of valid length")


def words(text):
    """Tokens for the similarity cap: words and single symbols, so URLs count part by part."""
    return re.findall(r"\w+|[^\w\s]", text.lower())


def too_similar(tokens, others, cap):
    """Token-level difflib ratio above the cap against any of `others` (tokens, not characters:
    much faster, and closer to what a reader calls "the same post"). Identical texts count too."""
    sm = difflib.SequenceMatcher(None, b=tokens)  # b is cached across comparisons
    for o in others:
        sm.set_seq1(o)
        if sm.real_quick_ratio() > cap and sm.quick_ratio() > cap and sm.ratio() > cap:
            return True
    return False


def near_repeat_edit(rng, text, topic, reposter, original_account):
    """Almost word-for-word copy: one emoji swap, word swap or short prefix."""
    if reposter != original_account:  # a teammate never mentions itself
        text = text.replace(f"@{reposter}", f"@{original_account}")
    for _ in range(20):
        kind = int(rng.integers(3))
        pool = T[topic]["emoji"]  # swap within the topic's own emoji so the meaning holds
        emojis = [e for e in pool if e in text]
        if kind == 0 and emojis:
            e = pick(rng, emojis)
            new = text.replace(e, pick(rng, [x for x in pool if x != e]), 1)
        elif kind == 0:
            new = text + " " + pick(rng, pool)
        elif kind == 1:
            swaps = [(a, b) for a, b in WORD_SWAPS if a in text]
            if not swaps:
                continue
            a, b = pick(rng, swaps)
            new = text.replace(a, b, 1)
        else:
            new = pick(rng, PREFIXES) + text
        if new != text and len(new) <= 260 and difflib.SequenceMatcher(None, text, new).ratio() > 0.85:
            # 0.85 on characters; ordinary same-account posts stay below ~0.75 within 30 days
            return new
    raise RuntimeError("no valid near-repeat edit")


def elapsed(later, earlier):
    """Real time between two aware datetimes (same-zone subtraction in Python is wall-clock)."""
    return later.astimezone(timezone.utc) - earlier.astimezone(timezone.utc)


def local_dt(wall, zone):
    """Attach zone to a naive wall time; round-trip via UTC so DST-gap times become real ones."""
    z = ZoneInfo(zone)
    return wall.replace(tzinfo=z).astimezone(timezone.utc).astimezone(z)


def log_mean(p):
    local = p["local"]
    years = (local.date() - START).days / 365.25
    return (ACCOUNTS[p["account"]]["base"] + TOPIC_EFFECT[p["topic"]] + HOUR_EFFECT[local.hour]
            + LINK * p["has_link"] + MEDIA * p["has_media"] + WEEKEND * (local.weekday() >= 5)
            + TREND_PER_YEAR * years)


def generate():
    rng = np.random.default_rng(SEED)
    days = [START + timedelta(d) for d in range((END - START).days + 1)]
    day_w = np.array([WEEKEND_POSTING if d.weekday() >= 5 else 1.0 for d in days])
    hour_p = np.array(HOUR_WEIGHT) / sum(HOUR_WEIGHT)
    n_planted = {a: REPEATS["same_account"][a] + sum(c for r, _, c in REPEATS["teammate"] if r == a)
                 for a in ACCOUNTS}

    # 1. Ordinary posts: time, topic, link, media.
    posts = []
    for acct, cfg in ACCOUNTS.items():
        n = cfg["n_posts"] - n_planted[acct]
        for di, h, mi, ti in zip(rng.choice(len(days), n, p=day_w / day_w.sum()),
                                 rng.choice(24, n, p=hour_p), rng.integers(0, 60, n),
                                 rng.choice(len(TOPICS), n, p=TOPIC_MIX[acct])):
            d = days[di]
            posts.append(dict(account=acct, topic=TOPICS[ti], kind="ordinary",
                              local=local_dt(datetime(d.year, d.month, d.day, int(h), int(mi)), cfg["zone"]),
                              has_link=bool(rng.random() < P_LINK), has_media=bool(rng.random() < P_MEDIA)))
    posts.sort(key=lambda p: (p["local"].astimezone(timezone.utc), p["account"]))

    # 2. Texts in time order. Reject a text too close to an earlier same-topic post of any
    #    account: a strict cap within 30 days (where repeat warnings matter), a looser one over
    #    the whole history (checked within the same template, where old look-alikes come from).
    #    Only the planted repeats should look like repeats.
    seen = {t: [] for t in TOPICS}  # (time, template id, tokens) of accepted texts, per topic
    for p in posts:
        hist = seen[p["topic"]]  # a topic has < 60 posts in any 30 days, so the tail suffices
        recent = [w for t, _, w in hist[-200:] if elapsed(p["local"], t) < timedelta(days=30)]
        for _ in range(300):
            text, tid = compose(rng, p["topic"], p["account"], p["local"], p["has_link"])
            tok = words(text)
            same_template = [w for _, i, w in hist if i == tid]
            if not too_similar(tok, recent, CAP_30_DAYS) and not too_similar(tok, same_template, CAP_EVER):
                break
        else:
            raise RuntimeError("template pools too small for the similarity caps")
        p["text"] = text
        seen[p["topic"]].append((p["local"], tid, tok))

    # 3. Planted near-repeats of an earlier ordinary post (same account or a teammate's).
    used, planted = set(), []
    plan = [(a, a, c, "same_account", 19) for a, c in REPEATS["same_account"].items()]
    plan += [(r, o, c, "teammate", 5) for r, o, c in REPEATS["teammate"]]
    for reposter, orig_acct, count, kind, max_days in plan:
        lo, hi = timedelta(days=1), timedelta(days=max_days + 1)
        pool = [i for i, p in enumerate(posts) if p["account"] == orig_acct and i not in used
                and p["local"].date() <= END - timedelta(days=max_days + 2)]
        for i in rng.choice(pool, count, replace=False):
            used.add(int(i))
            orig = posts[i]
            # Same wall-clock time d days later (+0-2h), in the reposter's own zone.
            wall = orig["local"].replace(tzinfo=None) + timedelta(days=int(rng.integers(1, max_days + 1)),
                                                                  minutes=int(rng.integers(0, 121)))
            loc = local_dt(wall, ACCOUNTS[reposter]["zone"])
            if elapsed(loc, orig["local"]) < lo:  # a zone or DST shift made it under a day
                loc = local_dt(wall + timedelta(days=1), ACCOUNTS[reposter]["zone"])
            assert lo <= elapsed(loc, orig["local"]) <= hi
            planted.append(dict(account=reposter, topic=orig["topic"], kind=kind, local=loc,
                                has_link=orig["has_link"], has_media=orig["has_media"], original=orig,
                                text=near_repeat_edit(rng, orig["text"], orig["topic"], reposter, orig_acct)))
    posts += planted
    posts.sort(key=lambda p: (p["local"].astimezone(timezone.utc), p["account"]))

    # 4. Ids (chronological per account), impressions and engagement metrics.
    counters = {a: 0 for a in ACCOUNTS}
    for p in posts:
        counters[p["account"]] += 1
        p["post_id"] = f"{ACCOUNTS[p['account']]['prefix']}-{counters[p['account']]:06d}"
        p["log_mean"] = log_mean(p)
        p["impressions"] = int(round(float(np.exp(p["log_mean"] + rng.normal(0, NOISE_SD)))))
        rate = min(0.2, ENGAGEMENT_RATE[p["topic"]] * float(np.exp(rng.normal(0, ENGAGEMENT_RATE_SD))))
        p["engagements"] = int(rng.binomial(p["impressions"], rate))
        split = ENGAGEMENT_SPLIT["link" if p["has_link"] else "no_link"]
        shares = list(split.values())
        parts = rng.multinomial(p["engagements"], shares + [1 - sum(shares)])
        p.update(zip(split, (int(x) for x in parts[:-1])))
    return posts, planted


def plan_drafts(posts):
    """Eight December drafts; q-004 nearly repeats the newest main-account blooms post."""
    last = [p for p in posts if p["account"] == "loomhaven" and p["topic"] == "blooms"
            and p["kind"] == "ordinary"][-1]
    rng = np.random.default_rng(SEED + 1)
    drafts = [
        ("q-001", "loomhaven", "blooms", 2, 12, 30,
         "Frost on the Winter Walk this morning and the witch hazels are glowing orange through it 🌼 "
         "Wrap up and come early. #WhatsFlowering"),
        ("q-002", "loomhaven_events", "events", 4, 18, 0,
         "The Lantern Trail opens on Fri 11 December, 5-9pm. Hot drinks, music and a glasshouse "
         "lit up like never before. Tickets: https://loomhaven.example/events/2026-12-lantern-trail"),
        ("q-003", "loomhaven_lab", "plant_science", 7, 12, 15,
         "Year-end lab note 🔬 the seed bank passed 9,000 accessions this year, and the cold room "
         "finally has a backup chiller. Thanks to @loomhaven_events for the fundraiser."),
        ("q-004", "loomhaven", "blooms", 9, 13, 0,
         near_repeat_edit(rng, last["text"], "blooms", "loomhaven", "loomhaven")),
        ("q-005", "loomhaven", "shop_membership", 10, 10, 0,
         "Gift memberships are 15% off until Sunday 🎁 Free entry all year for someone you love. "
         "Join: https://loomhaven.example/shop/2026-12-gift-memberships"),
        ("q-006", "loomhaven_events", "volunteering", 14, 9, 30,
         "We need event stewards for the Lantern Trail evenings. Full training given, warm coats "
         "provided. Fancy joining us?"),
        ("q-007", "loomhaven", "behind_the_scenes", 16, 23, 15,
         "Behind the scenes: the glasshouse team wrapped every tender palm in fleece before tonight's "
         "frost. Muddy boots, happy gardeners 🌿"),
        ("q-008", "loomhaven_lab", "plant_science", 21, 19, 0,
         "Winter solstice in the lab: our moss misting trial ends today. Early read: fine mist "
         "wins. Full notes in January. #PlantScience"),
    ]
    rows = [dict(draft_id=d, account=a, text=text,
                 planned_at=local_dt(datetime(2026, 12, day, h, mi), ACCOUNTS[a]["zone"]).isoformat())
            for d, a, _, day, h, mi, text in drafts]
    notes = {"topics": {d: t for d, _, t, *_ in drafts},
             "near_repeat": {"draft_id": "q-004", "account": last["account"], "post_id": last["post_id"]},
             "weak_topic": {"draft_id": "q-005", "topic": "shop_membership", "has_link": True},
             "night_hour": {"draft_id": "q-007", "local_hour": 23}}
    return rows, notes


def plan_published(rows, notes):
    """The plan's drafts as they went out, with outcomes from the history's own model.

    For the track-record demo and test: each draft goes out 0-40 minutes after its planned
    time. q-001 to q-004 carry their draft_id (an explicit link); q-005 to q-007 carry none
    and are matched by text and time (q-006 with a light edit: a closing phrase added);
    q-008 is never published. Same impression model and noise as the history.
    """
    rng = np.random.default_rng(SEED + 2)
    out = []
    for i, r in enumerate(rows[:7]):
        planned = datetime.fromisoformat(r["planned_at"])
        local = planned.astimezone(ZoneInfo(ACCOUNTS[r["account"]]["zone"]))
        local += timedelta(minutes=int(rng.integers(0, 41)))
        text = r["text"] + (" Sign up at the visitor desk." if r["draft_id"] == "q-006" else "")
        p = dict(account=r["account"], topic=notes["topics"][r["draft_id"]], local=local,
                 has_link="https://" in text, has_media=False)
        impressions = int(round(float(np.exp(log_mean(p) + rng.normal(0, NOISE_SD)))))
        out.append(dict(post_id=f"{ACCOUNTS[r['account']]['prefix']}-dec-{i + 1:03d}",
                        account=r["account"], text=text, posted_at=local.isoformat(),
                        impressions=impressions, has_media="false",
                        draft_id=r["draft_id"] if i < 4 else ""))
    return out


SAMPLE_DRAFT = ("The magnolias along the Long Border are opening this week 🌸 Come for a slow walk "
                "before the petals drop. #WhatsFlowering\n")


def write_csv(path, header, rows):
    with open(path, "w", newline="", encoding="utf-8") as f:  # csv's default CRLF = RFC 4180
        w = csv.DictWriter(f, fieldnames=header, extrasaction="ignore")
        w.writeheader()
        w.writerows(rows)


def main(out):
    out.mkdir(parents=True, exist_ok=True)
    posts, planted = generate()
    header = ["post_id", "account", "text", "posted_at", "impressions", "engagements", "likes",
              "reposts", "replies", "link_clicks", "profile_clicks", "has_media"]
    write_csv(out / "posts.csv", header,
              [dict(p, posted_at=p["local"].isoformat(), has_media=str(p["has_media"]).lower())
               for p in posts])
    # Ground truth for tests: topic label and noise-free expected log(impressions).
    write_csv(out / "truth.csv", ["account", "post_id", "topic", "has_link", "expected_log_impressions"],
              [dict(p, has_link=str(p["has_link"]).lower(), expected_log_impressions=f"{p['log_mean']:.4f}")
               for p in posts])
    planted.sort(key=lambda p: p["local"].astimezone(timezone.utc))
    write_csv(out / "planted_repeats.csv",
              ["account", "post_id", "original_account", "original_post_id", "days_after", "kind"],
              [dict(account=p["account"], post_id=p["post_id"], original_account=p["original"]["account"],
                    original_post_id=p["original"]["post_id"], kind=p["kind"],
                    days_after=f"{elapsed(p['local'], p['original']['local']).total_seconds() / 86400:.2f}")
               for p in planted])
    rows, notes = plan_drafts(posts)
    write_csv(out / "plan.csv", ["draft_id", "account", "text", "planned_at"], rows)
    write_csv(out / "plan_published.csv", ["post_id", "account", "text", "posted_at", "impressions",
                                           "has_media", "draft_id"], plan_published(rows, notes))
    (out / "sample_draft.txt").write_text(SAMPLE_DRAFT, encoding="utf-8")
    effects = {
        "seed": SEED, "numpy_version_used": np.__version__,
        "date_range_local": [START.isoformat(), END.isoformat()],
        "model": "log(impressions) = account_base + topic + hour[local hour] + link*has_link "
                 "+ media*has_media + weekend*is_sat_or_sun + trend_per_year*years_since_2025-05-01 "
                 "+ Normal(0, noise_sd); impressions = round(exp(.))",
        "accounts": {a: dict(display_name=c["display_name"], zone=c["zone"], n_posts=c["n_posts"])
                     for a, c in ACCOUNTS.items()},
        "account_base": {a: c["base"] for a, c in ACCOUNTS.items()},
        "topic_effect": TOPIC_EFFECT, "topic_order_strongest_first": TOPICS,
        "topic_mix": {a: dict(zip(TOPICS, m)) for a, m in TOPIC_MIX.items()},
        "hour_effect": {str(h): v for h, v in enumerate(HOUR_EFFECT)},
        "best_hours": [h for h, v in enumerate(HOUR_EFFECT) if v == max(HOUR_EFFECT)],
        "posting_hour_weight": {str(h): w for h, w in enumerate(HOUR_WEIGHT)},
        "link": LINK, "media": MEDIA, "weekend": WEEKEND, "trend_per_year": TREND_PER_YEAR,
        "noise_sd": NOISE_SD, "p_link": P_LINK, "p_media": P_MEDIA,
        "weekend_posting_volume": WEEKEND_POSTING,
        "engagement_rate": ENGAGEMENT_RATE, "engagement_rate_lognormal_sd": ENGAGEMENT_RATE_SD,
        "engagement_split": ENGAGEMENT_SPLIT,
        "planted_repeats": {"same_account": sum(REPEATS["same_account"].values()),
                            "teammate": sum(c for *_, c in REPEATS["teammate"]),
                            "same_account_days": [1, 20], "teammate_days": [1, 6],
                            "min_char_difflib_ratio_to_original": 0.85},
        "ordinary_similarity_cap": {"measure": "difflib ratio on word/symbol tokens",
                                    "scope": "same topic, any account",
                                    "within_30_days": CAP_30_DAYS,
                                    "whole_history_same_template": CAP_EVER},
        "topic_phrases": TOPIC_PHRASES,
        "plan": notes,
    }
    (out / "effects.json").write_text(json.dumps(effects, indent=2, ensure_ascii=False) + "\n",
                                      encoding="utf-8")
    counts = {a: sum(p["account"] == a for p in posts) for a in ACCOUNTS}
    print(f"wrote {len(posts)} posts {counts}, {len(planted)} planted repeats to {out}")


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).resolve().parent)
