"""Compose the corpusmill demo corpus in ``demo_raw/``.

The corpus is the invented archive of the Ivenne Lantern and Ferry Cooperative,
a river-valley guild of lantern makers and ferry keepers on the invented world
Ostrevane (two moons, Pell and Ossary).  Every sentence template, word list and
name below is made up for this script; nothing is quoted from anywhere.  It
exists so the pipeline (clean -> tokenize -> vocabulary -> n-gram windows ->
Parquet shards) has a small, realistic, fully reproducible input: ~69k words
(~300 kB), Zipf-like word frequencies and a long tail of coined words and
names (so a min-count-2 vocabulary gives a few percent OOV on held-out text).

Output (``demo_raw/`` is deleted and rewritten on every run):

* ``logs/ferry_log_spring.txt``, ``logs/ferry_log_autumn.txt`` -- UTF-8, LF;
  one document per blank-line-separated paragraph (2-10 sentences), about
  half of them hard-wrapped over several lines.
* ``letters/letters.jsonl.gz`` -- gzip (mtime=0, no filename) JSON Lines,
  ``{"id": "letter-0001", "text": ..., "author": ...}``; text contains ``\\n``.
* ``minutes/council_minutes.txt.zst`` -- zstd-compressed paragraphs, LF.
* ``workshop/workshop_notes.txt`` -- paragraphs with CRLF line endings.
* ``journals/weather_journal.txt``, ``journals/recipes.txt`` -- paragraphs, LF.

Deliberately messy cases (for the cleaning and dedup stages):

* Exact duplicates: SHARED_NOTICE appears twice in ferry_log_spring, once in
  ferry_log_autumn and once in the minutes; one weather paragraph is repeated
  later in the same file; letter-0100 has the same text as letter-0010.
* Normalisation: the names Or\u00e9la, T\u00fcvvik, D\u00e4hlo, S\u00e9vrin are NFC everywhere
  except in NFD (combining U+0301/U+0308) in all letters written by T\u00fcvvik
  (their "author" field stays NFC), in NAME_PARAGRAPH as it appears in
  ferry_log_autumn (its NFC twin is in ferry_log_spring), and in one minutes
  paragraph.
* Whitespace: WHITESPACE_PARAGRAPH (ferry_log_spring) has a tab, runs of
  spaces, trailing spaces and a no-break space U+00A0 (one more U+00A0 sits
  in the weather journal, "N.N\u00a0spans"); some paragraph separators in
  the LF files are lines holding only spaces or an extra blank line; the
  workshop notes have a tab-indented line and trailing spaces
  ("Stock check postponed." and TALLY_PARAGRAPH).
* Control and invisible characters: U+0007 BEL in BELL_PARAGRAPH
  (ferry_log_spring), U+000B in VT_PARAGRAPH (minutes; note str.splitlines
  treats it as a line break), U+200B zero-width space in ZWSP_PARAGRAPH
  (ferry_log_autumn) and in EMOJI_LETTER.
* Emoji in letters, including the ZWJ sequence woman mechanic and a
  variation-selector ferry, in EMOJI_LETTER and random postscripts.
* Junk documents: the single-word paragraph "Fog." (ferry_log_spring) and the
  digits-and-bars TALLY_PARAGRAPH (workshop notes).
"""

from __future__ import annotations

import gzip
import io
import json
import random
import re
import shutil
import textwrap
import unicodedata
from collections.abc import Callable
from pathlib import Path

import zstandard

OUT = Path(__file__).resolve().parent.parent / "demo_raw"

# --- invented names (accented ones written as escapes so the script is NFC-safe)
ORELA = "Or\u00e9la"
TUVVIK = "T\u00fcvvik"
DAHLO = "D\u00e4hlo"
SEVRIN = "S\u00e9vrin"

# --- word lists; earlier entries are picked more often (see zipf()) ---------
PEOPLE = [
    ORELA,
    TUVVIK,
    "Dr. Quillane",
    "Maelo",
    "Sabeth Orrin",
    "Wennick",
    "Keeper Vantis",
    "old Marrowne",
    "Ilvane Tosk",
    "Pim Oddrey",
    "Garrow Fenn",
    f"{DAHLO} Sprigg",
    "Annick Velle",
    "Joss Umbertree",
    f"{SEVRIN} Oakhallow",
    "Dr. Hesper Quillane",
    "Mother Brisk",
    "Tobbin Harl",
    "Quenna Dask",
    "Ferrow the smith",
]
PLACES = [
    "Korrimund",
    "Vesk Landing",
    "Pellowan",
    "Tarnwhistle",
    "Ombrel Ford",
    "Lissendrae",
    "the Quenning Narrows",
    "Havrosk",
    "Upper Ivenne",
    "the Saltreed flats",
    "Orrin's Wharf",
    "Fendrowe",
]
BOATS = [
    "the Patient Heron",
    "the Lamplight",
    "the Third Daughter",
    "the Slow Otter",
    "the Greyjack",
    "the Wicker Queen",
    "the Small Mercy",
    "the Dunmoth",
]
MONTHS = [
    "Thawmonth",
    "Reedmonth",
    "Greenwater",
    "Highsun",
    "Drymonth",
    "Emberfall",
    "Mistmonth",
    "Longdark",
    "Icemonth",
    "Kindling",
]
FESTIVALS = ["Lantern Night", "the Thaw Fair", "the Moonsmeet", "the Reed Harvest", "Ferryman's Eve"]
ORDINALS = [
    "first",
    "second",
    "third",
    "fourth",
    "fifth",
    "sixth",
    "seventh",
    "eighth",
    "ninth",
    "tenth",
    "eleventh",
    "twelfth",
]
SMALL_NUMBERS = ["two", "three", "four", "five", "six", "seven", "eight", "nine", "ten", "eleven", "twelve"]
RARE = [
    "cordwhistle",
    "nettlewax",
    "bramblepitch",
    "fernglass",
    "oxlight",
    "spindlecress",
    "mothsilk",
    "larkwort",
    "cobblesalt",
    "reedvellum",
    "hobnettle",
    "dunwhistle",
    "emberwick",
    "quillmoss",
    "tarrowbark",
    "sedgefelt",
    "ashcurd",
    "pitchnut",
    "willowglim",
    "marlstone",
    "pondlace",
    "sorrelsmoke",
    "otterfat",
    "rushbutter",
    "clovewick",
    "gorsewool",
    "lindenpaste",
    "creekbloom",
    "slatewhey",
    "mallowgrit",
    "pebblerind",
    "fogbutter",
    "wrenglass",
    "hazelpitch",
    "loamsugar",
    "duckweed tea",
    "sparkfern",
    "coldwick",
    "ripplecress",
    "bargewort",
]
CARGO = [
    "sacks of millet",
    "crates of dried reedfruit",
    "barrels of glimmer-oil",
    "bales of tallowgrass",
    "the post bag",
    "three goats",
    "jars of pitch",
    "coils of sallowcord",
    "baskets of eels",
    "a dozen lantern frames",
    "cases of wickglass",
    "firewood",
    "salt blocks",
    "a cart and two mules",
    "kegs of pear cider",
    "roof slates",
    "bolts of dyed linen",
    "a crated loom",
    "a wedding party",
    "a sick calf",
    "seed potatoes",
    "a {coined} in a cage",
    "bundles of {rare}",
    "a drumharp wrapped in blankets",
]
PARTS = [
    "wick",
    "chimney",
    "bowl",
    "hood",
    "bail",
    "collar",
    "drip-pan",
    "vent cap",
    "reflector",
    "hinge",
    "shutter",
    "burner",
]
PARTS_PL = ["wicks", "chimneys", "bowls", "hoods", "collars", "drip-pans", "vent caps", "reflectors", "hinges"]
MATERIALS = [
    "brass",
    "tin",
    "wickglass",
    "reed-paper",
    "clay",
    "tallow",
    "glimmer-oil",
    "copper wire",
    "emberpith",
    "horn",
    "lampblack",
    "beeswax",
]
TOOLS = ["glass saw", "scoring wheel", "wick press", "soldering iron", "big file", "bench vice", "pipe cutter"]
COLOURS = ["amber", "smoke-grey", "green", "rose", "pale gold", "blue", "milk-white", "copper"]
ANIMALS = [
    "herons",
    "otters",
    "marsh-larks",
    "velk",
    "goats",
    "river hogs",
    "dragonflies",
    "swallows",
    "reed-cats",
    "mudcurl",
]
DIRECTIONS = ["north", "west", "south-west", "east", "north-east", "south", "valley mouth"]
WIND_ADJ = ["gusty", "light", "steady", "fresh", "strong", "fitful", "bitter"]
SKY = ["overcast", "clear", "hazy", "bright", "grey and low", "streaked with high cloud", "dark"]
CURRENT_ADJ = ["sluggish", "brisk", "treacherous", "muddy", "high", "low and clear", "unpredictable"]
TREND = ["up a hand", "down a little", "unchanged", "rising", "falling fast"]
SIDES = ["east", "west", "port", "starboard"]
SHOALS = ["Crooked", "Gullet", "Widow's", "Long", "Sandy", "Pike"]
LANTERN_ADJ = ["new", "green-glass", "old", "mended", "borrowed", "hooded", "tall"]
COMPARE = ["more than", "fewer than", "about the same as", "well above", "a little under"]
DOCKS = ["north jetty", "lower steps", "toll-house landing", "old quay"]
SAYINGS = [
    "A dry lantern is a lazy lantern",
    "The river keeps no ledger",
    "Slow water, quick tongues",
    "Never trust a calm Reedmonth",
    "Pay the keeper, bless the boat",
    "Mud today, bread tomorrow",
]
TOPICS = [
    "the repair of the eastern jetty",
    "the price of glimmer-oil",
    "night crossings in flood season",
    "the apprentices' wages",
    "the new bell for {place}",
    "the dispute over the {shoal} shoal",
    "the lantern fund",
    "the tithe owed to {place}",
    "moorings for visiting boats",
    "the state of the road to {place}",
    "whether to buy a second kiln",
    "the rota for the night watch",
    "the leaking roof of the meeting hall",
]
MOTIONS = [
    "the eastern jetty be rebuilt in stone",
    "apprentices receive a half-share of fares",
    "the night crossing be suspended until the water falls",
    "a second bell be hung at {place}",
    "the cooperative buy {num} {part_pl} from {place}",
    "fares rise by {n_small} pennets",
    "{person} be thanked for {good_deed}",
]
GOOD_DEEDS = [
    "mending the toll-house roof",
    "organising {festival}",
    "twenty years at the tiller",
    "finding the lost post bag",
]
PURCHASES = [
    "a new {part} for {boat}",
    "{num} yards of sallowcord",
    "a second kiln",
    "paint for the toll-house",
    "a better barometer",
]
OPINIONS = [
    "the cost was too high",
    "the keepers had not been consulted",
    "the matter could wait until {month}",
    "it was unfair to the apprentices",
    "the river would simply undo the work",
]
VOTES = ["by {n_small} votes to {n_small}", "unanimously", "on a show of hands", "narrowly, {n_small} to {n_small}"]
NEWS = [
    "the old mill finally fell down",
    "{person} has taken up the fiddle",
    "{boat} has a new coat of paint",
    "there are ducklings under the jetty",
    "{person} and {person} are no longer speaking",
    "a stranger called {stranger} has bought the empty house by the ford",
]
RUMOURS = [
    "{place} wants its own ferry",
    "the council will raise fares by {coins}",
    "the {shoal} shoal is going to close the channel",
    "{person} is leaving for {place}",
]
ANECDOTES = [
    "{person} fell off the jetty holding a full lantern and kept it lit",
    "the goats got into the kiln shed",
    "{person} mistook a {coined} for a cat",
    "{boat} drifted off in the night and came back on its own",
]
SMELLS = ["hot tallow", "wet reeds", "glimmer-oil", "bread from Pim's oven", "river mud"]
FOODS = ["pear cider", "reedfruit jam", "smoked eel", "honeyed millet", "pickled {rare}", "kessa root preserve"]
BOOKS = [
    "the almanac",
    "the old ferry ledgers",
    '"The Keeper\'s Reckoning"',
    "that book of river songs",
    "Dr. Quillane's notes on fevers",
]
PERSON_ADJ = ["slow", "nervous", "cheerful", "clumsy", "very quiet", "sharp-tongued"]
SIGNS = ["a ring round Pell", "geese flying low", "the herons leaving early", "a red dawn over {place}"]
MOON_PHASES = ["full", "new", "waxing", "waning", "half"]
THIN = ["paper", "a fish scale", "breath on glass"]
INGREDIENTS = [
    "millet",
    "reedfruit",
    "kessa root",
    "river eel",
    "pear",
    "barley",
    "onion",
    "marsh cress",
    "goat's cheese",
    "{rare}",
]
SPICES = ["brindleseed", "salt", "pepperbark", "dried larkwort", "honey", "smoked {rare}"]
PREPS = ["chop", "soak", "grate", "mash", "rinse", "roast"]
THINGS = [
    "ladder",
    "bucket",
    "sail",
    "net",
    "ledger",
    "kettle",
    "gangplank",
    "anchor chain",
    "oar",
    "tarpaulin",
    "signal flag",
    "lamp-hook",
    "bench",
    "crate",
    "sieve",
    "spade",
    "broom",
    "grindstone",
    "toll box",
    "stool",
    "cauldron",
    "rain barrel",
    "weathervane",
    "oilcloth",
    "mallet",
    "rake",
    "handcart",
    "boathook",
    "fish trap",
    "pulley",
    "water jug",
    "door latch",
    "chicken coop",
    "slate roof",
    "wheelbarrow",
    "fence post",
    "sounding pole",
]
VERBS = [
    "mended",
    "painted",
    "carried",
    "inspected",
    "sold",
    "borrowed",
    "scrubbed",
    "weighed",
    "tarred",
    "patched",
    "lost",
    "found",
    "sharpened",
    "polished",
    "measured",
    "stacked",
    "wrapped",
    "repainted",
    "hid",
    "returned",
    "dried",
    "emptied",
    "propped up",
    "argued over",
    "traded away",
]
ADVERBS = [
    "carefully",
    "badly",
    "twice",
    "without complaint",
    "in a hurry",
    "by lamplight",
    "before breakfast",
    "at last",
    "for the third time",
    "slowly",
    "cheerfully",
    "grudgingly",
    "in the rain",
    "with great ceremony",
]
ADJECTIVES = [
    "crooked",
    "muddy",
    "quiet",
    "rusty",
    "strange",
    "warm",
    "heavy",
    "narrow",
    "splendid",
    "sour",
    "faint",
    "peculiar",
    "sturdy",
    "damp",
    "brittle",
    "gleaming",
    "ancient",
    "lopsided",
    "fragrant",
    "shabby",
    "stubborn",
    "generous",
    "restless",
    "noisy",
    "gentle",
    "worn",
    "dim",
    "cold",
]
STATES = [
    "broken",
    "leaking",
    "loose",
    "rusted",
    "cracked",
    "missing a nail",
    "full of water",
    "crooked",
    "filthy",
    "rotten through",
]
BREAKAGES = ["split", "rusted through", "lost a leg", "sprung a leak", "come apart at the seams"]
MOODS = [
    "cheerful",
    "short-tempered",
    "quiet",
    "restless",
    "unusually talkative",
    "gloomy",
    "in fine spirits",
    "worried",
]
CREATURES = ["heron", "fish", "beetle", "goat", "moth", "lizard", "frog", "owl"]
DISHES = [
    "{ingredient_cap} dumplings",
    "Ferry-keeper's stew",
    "Reedfruit tart",
    "Smoked eel with {spice}",
    "{coined_cap} pie",
    "Lantern Night buns",
    "Millet porridge, the Pellowan way",
]

# syllables for coined words and strangers' names: almost every one is unique
ONSETS = ["br", "k", "v", "th", "m", "s", "gl", "dr", "qu", "l", "p", "t", "z", "h", "sk", "w", "fr", "n", "r", "ch"]
VOWELS = ["a", "e", "i", "o", "u", "ai", "ou", "ee", "y", "au"]
CODAS = ["n", "rk", "ll", "sh", "t", "m", "sk", "rn", "", "th", "ck", "ve", "x", "nd"]

# --- sentence templates per genre -------------------------------------------
FERRY = [
    "Crossed to {place} with {cargo} and {n_small} passengers.",
    "{boat_cap} left the {dock} at {bell}, a little later than planned.",
    "Water stood at approx. {dec} spans against the marker post, {trend} since yesterday.",
    "{person} took the tiller while I saw to the lanterns.",
    "Wind from the {direction}, {wind_adj}; the crossing took {n_small} turns of the glass.",
    "A passenger named {stranger} asked whether we could carry {cargo} for free, and I said we could not.",
    "We paid {coins} at the {place} toll and were waved through.",
    "The rope on the {side} capstan is fraying again; I've marked it for {person}.",
    "No. {boatno} ferry was laid up all day with a cracked {part}.",
    "Saw {animal} on the {side} bank, more than I've counted all season.",
    "It's the {ordinal} crossing this month that has scraped the {shoal} shoal.",
    '"{saying}," said {person}, and nobody argued.',
    "Fares taken: {coins}, of which {coins} went to the lantern fund.",
    "The {lantern_adj} lantern at the bow burned steady the whole way (a wick from {person}'s workshop).",
    "Mist rose off the water before {bell} and did not lift until we were past {place}.",
    "Two children from {place} rode across to see {festival}, and one of them was sick over the rail.",
    "Unloaded {cargo} at {place} and took on {cargo} for the return.",
    "The current below {place} is {current_adj} this time of year, so I kept close to the {side} bank.",
    "I've logged {num} crossings since the start of {month}, which is {compare} last year.",
    "{person} says the {shoal} shoal has moved approx. {dec} spans downstream since the floods.",
    "Nothing else to report.",
    "A {coined} got tangled in the paddle and had to be cut free.",
    "Carried a sealed letter for {person} to {place}; no fare asked.",
    "The keeper's bell at {place} is cracked and sounds like a pot lid.",
    "We waited {n_small} bells for {boat} to clear the narrows before we could go.",
    "Small goods (e.g. jars, rope, lamp-glass) now go at half fare, by order of the council.",
]
MINUTES = [
    "{person} opened the meeting at {bell} and welcomed {n_small} members.",
    "The minutes of the previous meeting were read and approved with {n_small} corrections.",
    "{person} reported on {topic}, noting that costs had risen to {coins}.",
    "It was moved by {person} and seconded by {person} that {motion}.",
    "The motion carried {votes}.",
    "The motion failed {votes}, and {person} asked that the objection be recorded.",
    "Dr. Quillane raised the question of {topic} (see Item {n_small} of the last meeting).",
    "{person} said it's not the council's place to decide {topic} without asking the keepers first.",
    "The treasurer reported a balance of {coins}, approx. {dec} per cent less than at the start of {month}.",
    "A letter from {place} was read, asking for help with {topic}.",
    "Members agreed to revisit {topic} at the next meeting in {month}.",
    "{person} proposed that the lantern fund pay for {purchase}.",
    "There was a long discussion of {topic}; no decision was reached.",
    "{person} noted that {stranger} of {place} had offered to sell {cargo} at a fair price.",
    "The chair reminded members that {festival} falls on {date} this year.",
    "Action: {person} to write to the keepers at {place} about {topic}.",
    "{person} asked whether {boat} could be repaired before {month}, and was told it could not.",
    "Objections were raised by {person} and {person}, who felt that {opinion}.",
]
LETTER = [
    "I hope this finds you well and dry.",
    "The river has been {current_adj} all week, and {person} has been in a temper about it.",
    "Do you remember {festival} when we lost the oar and had to paddle with a pot lid?",
    "I've enclosed {n_small} sheets of {coined} paper for your sketches.",
    "Please tell {person} that I haven't forgotten the {coins} I owe.",
    "Things at {place} are much as you left them, except that {news}.",
    "I miss the smell of {smell} in the morning.",
    "Write back soon, and tell me everything about {place}.",
    "You wouldn't believe how dear {cargo} has become since {month}.",
    "{person} sends love and a jar of {food}.",
    "The new apprentice is {person_adj}, but she's good with glass.",
    "My hands are stained with {material} up to the wrists.",
    "I've been reading {book} again (the copy with the torn cover).",
    "If the weather holds I'll come down on {boat} before {date}.",
    "There's talk that {rumour}.",
    "We all laughed when {anecdote}.",
    "Don't worry about me; I'm eating well and sleeping better.",
    "Ask {person} whether the {part} I sent arrived in one piece.",
]
WORKSHOP = [
    "Batch No. {batchno}: {n_small} lanterns, {part} of {material}, {colour} finish.",
    "Fired the kiln to approx. {temp} degrees and held it for {dec} hours.",
    "The {part} cracked on {n_small} of them; I think the {material} was too wet.",
    "{person} suggests adding a pinch of {coined} ash to the glass.",
    "Mixed {dec} measures of glimmer-oil with {dec} of tallow; it smokes less than last week's.",
    "Trimmed the wicks to {dec} fingers and tested them in the draught room.",
    "Result: burned {num} minutes before guttering, which is {compare} the old wick.",
    "Note to self: don't leave the {material} near the window again.",
    "Ordered {num} {part_pl} from {stranger} at {place}, to arrive before {month}.",
    "The {tool} needs regrinding; it's tearing the {material} instead of cutting it.",
    "Maelo dropped the {part} mould, so we're down to {n_small}.",
    "Glass colour: {colour}, with a {colour} tint at the rim.",
    "Cost per lantern approx. {coins}, not counting labour.",
    "{person} wants {n_small} lanterns for {festival}, all {colour}.",
    "Tried a wire-and-reed frame for the small lanterns; too flimsy by half.",
    "Swept the floor, oiled the {tool}, and counted stock: {num} wicks, {num} panes.",
]
WEATHER = [
    "Morning {sky}, wind {direction} and {wind_adj}.",
    "Rain began at {bell} and measured {dec} fingers in the gauge by evening.",
    "Both moons up at dusk, Pell {moon_phase} and Ossary {moon_phase}.",
    "The river rose {dec} spans overnight.",
    "Frost on the {side} bank jetty, thin as {thin}.",
    "Air heavy and warm; the {animal} stayed in the reeds.",
    "Barometer (the old brass one) steady at {baro}.",
    "Thunder far off beyond {place}, but no rain here.",
    "Evening {sky}; the lamps at {place} were visible across the water.",
    "{person} says {sign} means a wet {month}.",
    "Fog so thick I couldn't see {boat} from the steps.",
    "Warmest day since {date}; the tar on the jetty went soft.",
    "A dry wind they call the {coined} came down the valley after noon.",
]
RECIPE = [
    "Take approx. {dec} cups of {ingredient} and {prep} it well.",
    "Add {n_small} spoons of {spice} and a splash of pear cider.",
    "Simmer for {n_small} bells, stirring now and then so it doesn't catch.",
    "Serve with {food} and plenty of bread.",
    "{person} adds {spice}, but I think that's too much.",
    "It keeps for {n_small} days in a cool jar.",
    "If there's no {ingredient}, use {ingredient} instead.",
    "Bake in a hot oven (the side nearest the flue) until golden.",
    'My grandmother called this dish "{coined}", though nobody knows why.',
]
ASIDES = [
    "It's been a long week.",
    "(More on this tomorrow.)",
    "I'm too tired to write more.",
    "See also the entry for {date}.",
    "That's all for now.",
]
COMMON = [
    "{person} {verb} the {thing} {adverb}.",
    "The {thing} by the {dock} is {state} again.",
    "Someone left a {thing} on the {dock}, and {person} {verb} it {adverb}.",
    "We need a new {thing} before {month}; the old one is {state}.",
    "{person} was {mood} all day, and I don't blame them.",
    "There's a {adjective} smell of {smell} about the place.",
    "I {verb} the {thing} {adverb} and then went to bed.",
    "By evening the {thing} was {state} and the {thing} was missing.",
    "{person}'s cousin {stranger} visited from {place} with a gift of {food}.",
    "The {adjective} {thing} that {person} bought at {place} has already {breakage}.",
    "A traveller from {place} told us about a {coined}, which sounds like a kind of {creature}.",
    "Heard a {adjective} song from across the water, something about a {coined}.",
    'I\'m told the word for it in the hill dialect is "{coined}".',
    "{person} keeps a {adjective} notebook of {coined} sightings.",
    "It rained on and off, and the {thing} got soaked.",
    "Approx. {num} people came, by {person}'s count.",
    "Paid {stranger} {coins} for a {adjective} {thing} and a sack of {rare}.",
]
EMOJI = [
    "\U0001f3ee",
    "\U0001f30a",
    "\u26f4\ufe0f",
    "\U0001f642",
    "\U0001f410\U0001f410\U0001f410",
    "\U0001f319\U0001f319",
    "\U0001f469\u200d\U0001f527",
]
WRITERS = [
    (f"{ORELA} Vantis", ORELA),
    (f"{TUVVIK} Marrowne", TUVVIK),
    ("Annick Velle", "Annick"),
    ("Dr. Hesper Quillane", "Hesper"),
    ("Maelo Dask", "Maelo"),
    (f"{DAHLO} Sprigg", DAHLO),
    (f"{SEVRIN} Oakhallow", SEVRIN),
]
CLOSINGS = ["Yours", "With love", "Warmly", "In haste", "Ever yours", "Your friend"]

# --- hand-written special documents (the messy cases) -----------------------
SHARED_NOTICE = (
    "Notice from the council: no crossings after the dusk bell until the water falls below 4.5 spans. Keepers who break this rule will lose a week's fares."
)
NAME_PARAGRAPH = (
    f"{ORELA} and {TUVVIK} came over on the early boat with {DAHLO}'s nephew. {SEVRIN} met them at the steps with a handcart and a very old umbrella."
)
WHITESPACE_PARAGRAPH = (
    "Took the big barge across at noon.\tThe load was heavy:  approx.   3.5\u00a0tonnes\n"
    "of roof slates for Havrosk.   \n"
    "Wennick says it's the heaviest load since Thawmonth, and I believe him.  "
)
BELL_PARAGRAPH = "The signal bell at the north jetty rang twice on its own\u0007 just after midnight. Nobody was there. Wennick thinks it was a reed-cat."
ZWSP_PARAGRAPH = "The ferry\u200bkeeper's hut needs a new door. I measured it at 1.9 by 0.8 spans and gave the numbers to Garrow Fenn."
VT_PARAGRAPH = "Item 9. Sabeth Orrin read the list of unpaid tolls.\u000bThe list was long. Members agreed to post it on the toll-house door."
NFD_MINUTES_PARAGRAPH = (
    f"Item 2. {ORELA} Vantis thanked {TUVVIK} Marrowne for the new lanterns on the Wicker Queen. {SEVRIN} Oakhallow asked for the same on the Greyjack."
)
TALLY_PARAGRAPH = "Tally, week 3:\n12 | 14 | 9 | 31 | --\n\t7 | 0 | 22 | 18 | --\n== | == | == | == | 113   "
EMOJI_LETTER = (
    "Dear Maelo,\n\n"
    "The kiln is fixed! Garrow says I'm now the valley's only lantern "
    "mechanic \U0001f469\u200d\U0001f527 and I intend to make everyone call me that. "
    "Come and see the new \u200bfurnace door before Lantern Night.\n\n"
    "Warmly,\nAnnick \U0001f3ee\U0001f525"
)

Gen = Callable[[random.Random], str]


def zipf(rng: random.Random, items: list[str]) -> str:
    """Pick an item with weight 1/rank, so the head is common and the tail rare."""
    return rng.choices(items, weights=[1.0 / (i + 1) for i in range(len(items))])[0]


def coin(rng: random.Random) -> str:
    """Make a fresh nonsense word of two or three syllables."""
    return "".join(rng.choice(ONSETS) + rng.choice(VOWELS) + rng.choice(CODAS) for _ in range(rng.choice([2, 2, 3])))


def ordinal_suffix(day: int) -> str:
    if day in (11, 12, 13):
        return "th"
    return {1: "st", 2: "nd", 3: "rd"}.get(day % 10, "th")


def date(rng: random.Random) -> str:
    day = rng.randint(1, 30)
    return f"the {day}{ordinal_suffix(day)} of {rng.choice(MONTHS)}"


def small_number(rng: random.Random) -> str:
    n = rng.randint(2, 12)
    return str(n) if rng.random() < 0.5 else SMALL_NUMBERS[n - 2]


def number(rng: random.Random) -> str:
    return f"{rng.choice([rng.randint(13, 99), rng.randint(100, 999), rng.randint(1000, 2600)]):,}"


def decimal(rng: random.Random) -> str:
    return rng.choice([f"{rng.randint(2, 95) / 10:.1f}", f"{rng.randint(1, 9)}.{rng.choice([25, 75])}"])


def coins(rng: random.Random) -> str:
    return f"{rng.choice([rng.randint(2, 60), rng.randint(60, 400), rng.randint(1000, 1900)]):,} pennets"


def bell(rng: random.Random) -> str:
    return rng.choice(
        [
            f"the {rng.choice(ORDINALS)} bell",
            f"half past the {rng.choice(ORDINALS)} bell",
            "dawn",
            "noon",
            "the dusk bell",
        ]
    )


def stranger(rng: random.Random) -> str:
    return f"{coin(rng).capitalize()} {coin(rng).capitalize()}"


def capitalised(gen: Gen) -> Gen:
    return lambda rng: capitalise(gen(rng))


def capitalise(text: str) -> str:
    return text[:1].upper() + text[1:]


def nfd(text: str) -> str:
    return unicodedata.normalize("NFD", text)


def pick(items: list[str]) -> Gen:
    return lambda rng: zipf(rng, items)


SLOTS: dict[str, Gen] = {
    "person": pick(PEOPLE),
    "place": pick(PLACES),
    "boat": pick(BOATS),
    "boat_cap": capitalised(pick(BOATS)),
    "month": pick(MONTHS),
    "festival": pick(FESTIVALS),
    "ordinal": pick(ORDINALS),
    "cargo": pick(CARGO),
    "rare": pick(RARE),
    "part": pick(PARTS),
    "part_pl": pick(PARTS_PL),
    "material": pick(MATERIALS),
    "tool": pick(TOOLS),
    "colour": pick(COLOURS),
    "animal": pick(ANIMALS),
    "direction": pick(DIRECTIONS),
    "wind_adj": pick(WIND_ADJ),
    "sky": pick(SKY),
    "current_adj": pick(CURRENT_ADJ),
    "trend": pick(TREND),
    "side": pick(SIDES),
    "shoal": pick(SHOALS),
    "lantern_adj": pick(LANTERN_ADJ),
    "compare": pick(COMPARE),
    "dock": pick(DOCKS),
    "saying": pick(SAYINGS),
    "topic": pick(TOPICS),
    "motion": pick(MOTIONS),
    "good_deed": pick(GOOD_DEEDS),
    "purchase": pick(PURCHASES),
    "opinion": pick(OPINIONS),
    "votes": pick(VOTES),
    "news": pick(NEWS),
    "rumour": pick(RUMOURS),
    "anecdote": pick(ANECDOTES),
    "smell": pick(SMELLS),
    "food": pick(FOODS),
    "book": pick(BOOKS),
    "person_adj": pick(PERSON_ADJ),
    "sign": pick(SIGNS),
    "moon_phase": pick(MOON_PHASES),
    "thin": pick(THIN),
    "ingredient": pick(INGREDIENTS),
    "ingredient_cap": capitalised(pick(INGREDIENTS)),
    "spice": pick(SPICES),
    "prep": pick(PREPS),
    "thing": pick(THINGS),
    "verb": pick(VERBS),
    "adverb": pick(ADVERBS),
    "adjective": pick(ADJECTIVES),
    "state": pick(STATES),
    "breakage": pick(BREAKAGES),
    "mood": pick(MOODS),
    "creature": pick(CREATURES),
    "coined": coin,
    "coined_cap": capitalised(coin),
    "stranger": stranger,
    "date": date,
    "n_small": small_number,
    "num": number,
    "dec": decimal,
    "coins": coins,
    "bell": bell,
    "boatno": lambda rng: str(rng.randint(1, 7)),
    "batchno": lambda rng: str(rng.randint(1, 240)),
    "temp": lambda rng: f"{rng.randint(120, 220) * 5:,}",
    "baro": lambda rng: f"{rng.randint(285, 305) / 10:.1f}",
}
SLOT_RE = re.compile(r"\{([a-z_]+)\}")


def fill(template: str, rng: random.Random) -> str:
    """Replace every {slot} (values may contain slots), avoiding repeats in a sentence."""
    used: list[str] = []

    def draw(match: re.Match[str]) -> str:
        value = SLOTS[match.group(1)](rng)
        for _ in range(5):
            if value not in used:
                break
            value = SLOTS[match.group(1)](rng)
        used.append(value)
        return value

    text = template
    while SLOT_RE.search(text):
        text = SLOT_RE.sub(draw, text)
    return capitalise(text)


def sentences(rng: random.Random, templates: list[str], count: int) -> list[str]:
    """Draw genre sentences mixed with shared everyday sentences and asides,
    using each template at most once per paragraph."""
    chosen: list[str] = []
    while len(chosen) < count:
        roll = rng.random()
        pool = ASIDES if roll < 0.05 else COMMON if roll < 0.3 else templates
        template = rng.choice(pool)
        if template not in chosen:
            chosen.append(template)
    return [fill(template, rng) for template in chosen]


def maybe_wrap(rng: random.Random, text: str) -> str:
    """Hard-wrap about half the paragraphs, at a varying width."""
    if rng.random() < 0.5:
        return textwrap.fill(text, width=rng.randint(58, 78))
    return text


def word_count(texts: list[str]) -> int:
    return sum(len(t.split()) for t in texts)


def log_paragraph(rng: random.Random, day_number: int) -> str:
    day = day_number % 30 + 1
    month = MONTHS[(day_number // 30) % len(MONTHS)]
    header = f"The {day}{ordinal_suffix(day)} of {month}, year 312."
    return " ".join([header, *sentences(rng, FERRY, rng.randint(1, 9))])


def compose_log(rng: random.Random, target: int, first_day: int, specials: dict[int, str]) -> list[str]:
    docs: list[str] = []
    day = first_day
    while word_count(docs) < target:
        if len(docs) in specials:
            docs.append(specials[len(docs)])
            continue
        day += rng.randint(1, 2)
        docs.append(maybe_wrap(rng, log_paragraph(rng, day)))
    return docs


def compose_paragraphs(rng: random.Random, templates: list[str], target: int, specials: dict[int, str], header: Gen | None = None) -> list[str]:
    """Generic paragraphs of 2-10 sentences (optionally led by a header sentence)."""
    docs: list[str] = []
    while word_count(docs) < target:
        if len(docs) in specials:
            docs.append(specials[len(docs)])
            continue
        if header is not None:
            body = [header(rng), *sentences(rng, templates, rng.randint(1, 9))]
        else:
            body = sentences(rng, templates, rng.randint(2, 10))
        docs.append(maybe_wrap(rng, " ".join(body)))
    return docs


def compose_minutes(rng: random.Random, target: int, specials: dict[int, str]) -> list[str]:
    """Meetings: a header paragraph (place, date, who came), then numbered items."""
    docs: list[str] = []
    item = 0
    while word_count(docs) < target:
        if len(docs) in specials:
            docs.append(specials[len(docs)])
        elif item == 0:
            present = ", ".join(rng.sample(PEOPLE[:12], rng.randint(3, 6)))
            docs.append(maybe_wrap(rng, (f"Minutes of the council, held at {zipf(rng, PLACES)} on {date(rng)}, year 312. Present: {present}.")))
            item = 1
        else:
            body = " ".join(sentences(rng, MINUTES, rng.randint(2, 9)))
            docs.append(maybe_wrap(rng, f"Item {item}. {body}"))
            item = 0 if rng.random() < 0.15 else item + 1
    return docs


def recipe_header(rng: random.Random) -> str:
    return f"{fill(zipf(rng, DISHES), rng)} (serves {rng.randint(2, 10)})."


def weather_header(rng: random.Random) -> str:
    return f"{capitalise(date(rng))}."


def compose_letter(rng: random.Random) -> tuple[str, str]:
    author, signature = zipf(rng, WRITERS)
    recipient = rng.choice([first for _, first in WRITERS if first != signature])
    paragraphs = [" ".join(sentences(rng, LETTER, rng.randint(2, 5))) for _ in range(rng.randint(1, 3))]
    text = f"Dear {recipient},\n\n" + "\n\n".join(paragraphs) + f"\n\n{rng.choice(CLOSINGS)},\n{signature}"
    if rng.random() < 0.15:
        text += f"\nP.S. {fill(rng.choice(LETTER), rng)} {rng.choice(EMOJI)}"
    if signature == TUVVIK:
        text = nfd(text)
    return author, text


def compose_letters(rng: random.Random, target: int) -> list[dict[str, str]]:
    records: list[dict[str, str]] = []
    while word_count([r["text"] for r in records]) < target:
        number = len(records) + 1
        if number == 42:
            author, text = "Annick Velle", EMOJI_LETTER
        elif number == 100:
            author, text = records[9]["author"], records[9]["text"]
        else:
            author, text = compose_letter(rng)
        records.append({"id": f"letter-{number:04d}", "text": text, "author": author})
    return records


def join_paragraphs(rng: random.Random, docs: list[str]) -> str:
    """Blank-line separators; a few are space-only lines or double blank lines."""
    parts = [docs[0]]
    for doc in docs[1:]:
        roll = rng.random()
        sep = "\n   \n" if roll < 0.03 else "\n\n\n" if roll < 0.06 else "\n\n"
        parts.append(sep + doc)
    return "".join(parts) + "\n"


def gzip_bytes(data: bytes) -> bytes:
    buffer = io.BytesIO()
    with gzip.GzipFile(fileobj=buffer, mode="wb", mtime=0, filename="") as handle:
        handle.write(data)
    return buffer.getvalue()


def main() -> None:
    if OUT.exists():
        shutil.rmtree(OUT)
    for sub in ["logs", "letters", "minutes", "workshop", "journals"]:
        (OUT / sub).mkdir(parents=True)

    spring = compose_log(
        random.Random(3101),
        11000,
        0,
        {
            3: NAME_PARAGRAPH,
            8: SHARED_NOTICE,
            14: WHITESPACE_PARAGRAPH,
            22: "Fog.",
            27: BELL_PARAGRAPH,
            31: SHARED_NOTICE,
        },
    )
    autumn = compose_log(
        random.Random(3102),
        11000,
        150,
        {
            6: nfd(NAME_PARAGRAPH),
            15: SHARED_NOTICE,
            19: ZWSP_PARAGRAPH,
        },
    )
    (OUT / "logs" / "ferry_log_spring.txt").write_bytes(join_paragraphs(random.Random(1), spring).encode())
    (OUT / "logs" / "ferry_log_autumn.txt").write_bytes(join_paragraphs(random.Random(2), autumn).encode())

    letters = compose_letters(random.Random(3103), 12000)
    jsonl = "".join(json.dumps(record, ensure_ascii=False) + "\n" for record in letters)
    (OUT / "letters" / "letters.jsonl.gz").write_bytes(gzip_bytes(jsonl.encode()))

    minutes = compose_minutes(
        random.Random(3104),
        12000,
        {
            4: nfd(NFD_MINUTES_PARAGRAPH),
            11: VT_PARAGRAPH,
            20: SHARED_NOTICE,
        },
    )
    minutes_text = join_paragraphs(random.Random(4), minutes).encode()
    compressor = zstandard.ZstdCompressor(level=19)
    (OUT / "minutes" / "council_minutes.txt.zst").write_bytes(compressor.compress(minutes_text))

    workshop = compose_paragraphs(
        random.Random(3105),
        WORKSHOP,
        10000,
        {
            17: TALLY_PARAGRAPH,
            33: "Stock check postponed.   \n\tSee the slate by the door.",
        },
    )
    workshop_text = "\n\n".join(workshop) + "\n"
    (OUT / "workshop" / "workshop_notes.txt").write_bytes(workshop_text.replace("\n", "\r\n").encode())

    weather = compose_paragraphs(random.Random(3106), WEATHER, 8000, {}, header=weather_header)
    weather.insert(40, weather[12])  # exact duplicate within the same file
    weather[25] = weather[25].replace(" spans", "\u00a0spans")
    (OUT / "journals" / "weather_journal.txt").write_bytes(join_paragraphs(random.Random(5), weather).encode())

    recipes = compose_paragraphs(random.Random(3107), RECIPE, 5000, {}, header=recipe_header)
    (OUT / "journals" / "recipes.txt").write_bytes(join_paragraphs(random.Random(6), recipes).encode())


if __name__ == "__main__":
    main()
