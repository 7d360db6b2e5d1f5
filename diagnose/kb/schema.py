"""The JSON Schema of a pack's YAML files (one schema for every file of a pack).

``diagnose kb schema`` prints it so that a trainer's editor can validate and
complete while typing; the loader validates every file against it (with
jsonschema) before the compiler looks at meaning.
"""

from __future__ import annotations

from typing import Any

ID = {"type": "string", "pattern": "^[a-z][a-z0-9_]*$",
      "description": "lower-case id: letters, digits and underscores, starting with a letter"}
PACK_ID = {"type": "string", "pattern": "^[a-z][a-z0-9-]*$",
           "description": "pack id: lower-case letters, digits and hyphens"}
TEXT = {"type": "string", "minLength": 1}
IDS = {"type": "array", "items": ID, "uniqueItems": True}
PROB = {"type": "number", "minimum": 0, "maximum": 1}
MINUTES = {"type": "number", "exclusiveMinimum": 0, "maximum": 100000,
           "description": "minutes of work, including getting at the part"}
SCALAR = {"type": ["string", "number", "boolean"]}
ONLY_IF = {"type": "object", "propertyNames": ID,
           "additionalProperties": {"anyOf": [SCALAR, {"type": "array", "items": SCALAR,
                                                        "minItems": 1}]},
           "description": "parameter -> value (or a list of values): applies only when the "
                          "nameplate matches; an unknown value keeps it"}
STATE_MAP = {"type": "object", "propertyNames": ID, "additionalProperties": ID,
             "description": "state id -> value"}
DISTRIBUTION = {
    "type": "object",
    "description": "outcome id -> probability; omitted outcomes share what is left evenly",
    "propertyNames": ID,
    "additionalProperties": {"type": "number"},
}

CAUTION = {
    "type": "object",
    "required": ["id", "level", "text"],
    "additionalProperties": False,
    "properties": {
        "id": ID,
        "level": {"enum": ["DANGER", "WARNING", "CAUTION", "NOTICE"],
                  "description": "signal word as in ANSI Z535 / ISO 3864"},
        "text": TEXT,
    },
}

PARAMETER = {
    "type": "object",
    "required": ["id", "prompt"],
    "additionalProperties": False,
    "properties": {
        "id": ID,
        "prompt": TEXT,
        "unit": {"type": "string", "description": "unit of the value, e.g. V, W, ohm, mm, degC"},
        "min": {"type": "number"},
        "max": {"type": "number"},
        "default": SCALAR,
        "unknown": {"type": "boolean", "description": "the answer 'unknown' is allowed"},
        "choices": {"type": "array", "items": {"type": "string"}, "minItems": 2},
        "only_if": {**ONLY_IF, "description": "asked only when the nameplate values already "
                                               "given match"},
    },
}

GATE_PROPS = {
    "gate": {"enum": ["or", "and", "k_of_n"], "default": "or"},
    "k": {"type": "integer", "minimum": 1, "description": "for k_of_n: how many inputs"},
    "inputs": {**IDS, "minItems": 1, "description": "causes or events under this gate"},
}

COMPLAINT = {
    "type": "object",
    "required": ["id", "title", "inputs"],
    "additionalProperties": False,
    "properties": {"id": ID, "title": TEXT, "caller": TEXT, "description": TEXT, **GATE_PROPS},
}

EVENT = {
    "type": "object",
    "required": ["id", "title", "inputs"],
    "additionalProperties": False,
    "properties": {"id": ID, "title": TEXT, "description": TEXT, "only_if": ONLY_IF,
                   **GATE_PROPS},
}

CAUSE = {
    "type": "object",
    "required": ["id", "title", "prior"],
    "additionalProperties": False,
    "properties": {
        "id": ID,
        "title": TEXT,
        "prior": {"type": "number", "exclusiveMinimum": 0, "maximum": 1000,
                  "description": "relative frequency: times found per 1,000 service calls"},
        "description": TEXT,
        "only_if": {**ONLY_IF, "description": "the cause exists only when the nameplate "
                                               "matches; otherwise it leaves the ranking"},
    },
}

MEASURE = {
    "type": "object",
    "required": ["evaluator"],
    "additionalProperties": False,
    "properties": {
        "evaluator": {"type": "string", "description": "a registered evaluator name"},
        "reading": {"type": "string", "description": "evaluator input the reading fills"},
        "unit": {"type": "string", "description": "unit assumed for a bare number"},
        "accuracy": {"type": "number", "minimum": 0, "maximum": 0.5,
                     "description": "meter accuracy as a fraction of the reading"},
        "inputs": {"type": "object", "additionalProperties": SCALAR,
                   "description": "evaluator input -> constant or $parameter"},
        "also": {
            "type": "object", "propertyNames": ID, "maxProperties": 4,
            "description": "further readings taken on the same card: evaluator input -> "
                           "its unit, or {unit, ask}",
            "additionalProperties": {
                "oneOf": [
                    {"type": "string"},
                    {"type": "object", "additionalProperties": False, "required": ["unit"],
                     "properties": {"unit": {"type": "string"}, "ask": TEXT}},
                ],
            },
        },
        "at": {**ID, "description": "where the reading is taken (coil_terminals, ...): two "
                                    "checks reading the same quantity at the same place are "
                                    "one reading"},
    },
}

CHECK = {
    "type": "object",
    "required": ["id", "title", "minutes", "ask"],
    "additionalProperties": False,
    "properties": {
        "id": ID,
        "title": TEXT,
        "minutes": MINUTES,
        "tools": {"type": "array", "items": TEXT},
        "where": {"enum": ["phone", "site"], "default": "site",
                  "description": "phone: safe for an untrained caller; site: on site only"},
        "cautions": IDS,
        "ask": {**TEXT, "description": "technician wording"},
        "caller": {**TEXT, "description": "plain wording for a caller on the phone"},
        "needs": {**IDS, "description": "checks that must be done first"},
        "only_if": ONLY_IF,
        "requires": {**STATE_MAP, "description": "the state of the unit this check needs"},
        "leaves": {**STATE_MAP, "description": "the state it leaves (default: as required)"},
        "replaces": {**ID, "description": "a check of a pack this one builds on that measures "
                                          "the same thing: this one takes its place"},
        "hazards": {**IDS, "description": "the hazards of doing it; [] says it has none"},
        "hazards_note": {**TEXT, "description": "why a step whose wording sounds hazardous "
                                               "has none (with `hazards: []`)"},
        "preparation": {"type": "boolean",
                        "description": "a step that secures or prepares; observes no cause"},
        "outcomes": {
            "oneOf": [
                {**IDS, "minItems": 2},
                {"type": "object", "propertyNames": ID, "additionalProperties": TEXT,
                 "minProperties": 1},
            ],
            "description": "outcome ids, or outcome id -> wording",
        },
        "normal": DISTRIBUTION,
        "unknown": DISTRIBUTION,
        "effects": {"type": "object", "propertyNames": ID, "additionalProperties": DISTRIBUTION,
                    "description": "cause id -> outcome probabilities when that cause is present"},
        "measure": MEASURE,
    },
}

REPAIR = {
    "type": "object",
    "required": ["id", "title", "minutes", "fixes"],
    "additionalProperties": False,
    "properties": {
        "id": ID,
        "title": TEXT,
        "minutes": MINUTES,
        "parts": {"type": "array", "items": TEXT,
                  "description": "a YAML block list, one whole part per item, a condition in "
                                 "parentheses: `- friction disc (if the faces are pitted)`"},
        "fixes": {**IDS, "minItems": 1},
        "success": {**PROB, "description": "P(cured | a cause it fixes is present)"},
        "cautions": IDS,
        "confirm": {**ID, "description": "the check that confirms the cure"},
        "needs": IDS,
        "ask": TEXT,
        "where": {"enum": ["phone", "site"], "default": "site"},
        "only_if": ONLY_IF,
        "observes": {**IDS, "description": "checks whose answer is in plain sight during this "
                                           "repair: asked on its card at no extra minutes"},
        "hazards": {**IDS, "description": "the hazards of doing it; [] says it has none"},
        "hazards_note": {**TEXT, "description": "why a repair whose wording sounds hazardous "
                                               "has none (with `hazards: []`)"},
        "requires": {**STATE_MAP, "description": "the state of the unit during the repair"},
        "leaves": {**STATE_MAP, "description": "the state the repair leaves (default: the "
                                               "unit put back as it was found)"},
    },
}

EXTENSION = {
    "type": "object",
    "required": ["check", "effects"],
    "additionalProperties": False,
    "description": "effects of this pack's causes on a check of a pack it builds on",
    "properties": {
        "check": ID,
        "effects": {"type": "object", "propertyNames": ID, "additionalProperties": DISTRIBUTION,
                    "minProperties": 1},
    },
}

#: The wording a device pack may override on an entity of a pack it builds on.
OVERRIDABLE = ("title", "ask", "caller", "cautions", "unit", "default", "min", "max",
               "description", "text", "prompt", "words", "values")

DEVICE = {
    "type": "object",
    "additionalProperties": False,
    "required": ["noun"],
    "description": "the device's terms: {device}, {switch_on}, ... in every worded field",
    "properties": {
        "noun": TEXT,
        "plural": TEXT,
        "energised": {"enum": ["released", "engaged"],
                      "description": "what energising the coil does to the device"},
        "states": {"type": "object", "additionalProperties": False,
                   "properties": {"released": TEXT, "engaged": TEXT}},
    },
}

OVERRIDE = {
    "type": "object",
    "required": ["id"],
    "additionalProperties": False,
    "description": "new wording for an entity of a pack this one builds on",
    "properties": {
        "id": ID,
        **{k: {} for k in OVERRIDABLE if k != "values"},
        "values": {"type": "object", "propertyNames": ID,
                   "additionalProperties": {"type": "object", "additionalProperties": False,
                                            "required": ["title"], "properties": {"title": TEXT}},
                   "description": "a state's value titles: value -> {title: ...}"},
    },
}

STATE = {
    "type": "object",
    "required": ["id", "title", "values", "initial"],
    "additionalProperties": False,
    "description": "a part of the state of the unit (power, cover, brake mounted...)",
    "properties": {
        "id": ID,
        "title": TEXT,
        "initial": {**ID, "description": "the value when the technician arrives"},
        "values": {
            "type": "object", "propertyNames": ID, "minProperties": 2,
            "additionalProperties": {
                "type": "object", "additionalProperties": False,
                "properties": {
                    "title": TEXT,
                    "minutes": {"type": "number", "minimum": 0, "maximum": 100000,
                                "description": "minutes to bring the unit to this value; "
                                               "omitted: no plain setup step reaches it"},
                    "renews_cautions": {"type": "boolean",
                                        "description": "moving into this value (power "
                                                       "restored, load support removed) "
                                                       "makes earlier acknowledgements lapse"},
                },
            },
        },
    },
}

HAZARD = {
    "type": "object",
    "required": ["id", "title"],
    "additionalProperties": False,
    "description": "a kind of hazard a step can bring (energises the coil, releases the "
                   "brake, works near a suspended load...) and the cautions it requires",
    "properties": {
        "id": ID,
        "title": TEXT,
        "only_if": {**ONLY_IF, "description": "the hazard exists only on such units (a "
                                               "suspended load only where gravity_load is yes)"},
        "cautions": {
            "type": "array",
            "description": "cautions every step with this hazard shows; each may hold only on "
                           "some units, or only after an answer (a coil read as shorted)",
            "items": {"anyOf": [ID, {
                "type": "object", "required": ["caution"], "additionalProperties": False,
                "properties": {"caution": ID, "only_if": ONLY_IF,
                               "after": {"type": "object", "propertyNames": ID,
                                         "additionalProperties": IDS,
                                         "description": "check -> outcomes: only once one "
                                                        "of them was found"},
                               "after_verdict": {
                                   "type": "object", "propertyNames": ID,
                                   "additionalProperties": IDS,
                                   "description": "evaluator -> verdicts: only once a reading "
                                                  "of any check by that evaluator gave one "
                                                  "(a coil read as shorted)"}}}]},
        },
        "withhold_until": {**STATE_MAP, "description": "steps with this hazard wait until the "
                                                       "unit is in this state"},
        "caller_safe": {"anyOf": [{"type": "boolean"}, ONLY_IF],
                        "description": "may a caller be guided through a step with it? true, "
                                       "false (default), or only on units whose nameplate "
                                       "is known to match"},
        "words": {"type": "array", "items": TEXT,
                  "description": "wording that betrays this hazard, for lint"},
    },
}

STEP = {
    "type": "object",
    "additionalProperties": False,
    "properties": {
        "check": ID,
        "answer": {"type": ["string", "number", "array", "boolean", "object"],
                   "additionalProperties": {"type": ["string", "number"]},
                   "description": "an outcome, a reading, or named readings {name: value}"},
        "skip": {"type": "boolean"},
        "repair": ID,
        "cured": {"type": "boolean"},
    },
    "oneOf": [{"required": ["check"]},
              {"required": ["repair", "cured"], "not": {"required": ["skip"]}},
              {"required": ["repair", "skip"], "properties": {"skip": {"const": True}},
               "not": {"required": ["cured"]}}],
}

CASE = {
    "type": "object",
    "required": ["id", "complaints", "steps", "expect_top"],
    "additionalProperties": False,
    "properties": {
        "id": ID,
        "title": TEXT,
        "complaints": {**IDS, "minItems": 1},
        "nameplate": {"type": "object", "additionalProperties": SCALAR},
        "mode": {"enum": ["site", "phone"]},
        "max_faults": {"type": "integer", "minimum": 1, "maximum": 2},
        "steps": {"type": "array", "items": STEP},
        "expect_top": {**IDS, "minItems": 1,
                       "description": "the top cause must be one of these"},
        "expect_below": {"type": "object", "propertyNames": ID, "additionalProperties": PROB,
                         "description": "cause -> probability it must end below"},
        "expect_absent": {**IDS, "description": "causes the nameplate must rule out (not "
                                                "in the ranking)"},
        "expect_not_asked": {**IDS, "description": "checks the planner must never propose "
                                                   "and nameplate questions not asked"},
        "expect_offered": {**IDS, "description": "checks offered as free observations "
                                                 "during a repair step of the case"},
    },
}


def _section(item: dict[str, Any]) -> dict[str, Any]:
    return {"type": "array", "items": item}


PACK_FILE_SCHEMA: dict[str, Any] = {
    "$schema": "https://json-schema.org/draft/2020-12/schema",
    "$id": "https://diagnose.invalid/schema/pack-file.json",
    "title": "diagnose knowledge pack file",
    "description": "One YAML file of a knowledge pack. pack.yaml also carries the manifest keys.",
    "type": "object",
    "additionalProperties": False,
    "properties": {
        "pack": PACK_ID,
        "title": TEXT,
        "version": {"type": ["string", "number"]},
        "builds_on": {"type": "array", "items": PACK_ID, "uniqueItems": True},
        "notice": TEXT,
        "unknown_prior": {"type": "number", "exclusiveMinimum": 0, "maximum": 1000,
                          "description": "'none of the known causes', per 1,000 service calls"},
        "leak": {**PROB, "description": "P(complaint) under a hypothesis outside its tree"},
        "description": TEXT,
        "cautions": _section(CAUTION),
        "parameters": _section(PARAMETER),
        "complaints": _section(COMPLAINT),
        "events": _section(EVENT),
        "causes": _section(CAUSE),
        "checks": _section(CHECK),
        "repairs": _section(REPAIR),
        "tests": _section(CASE),
        "states": _section(STATE),
        "hazards": _section(HAZARD),
        "extend_checks": _section(EXTENSION),
        "device": DEVICE,
        "override": _section(OVERRIDE),
        "hide": {"type": "array", "items": ID, "uniqueItems": True,
                 "description": "complaints or checks of the base packs not offered here"},
    },
}

SECTIONS = ("cautions", "parameters", "complaints", "events", "causes", "checks", "repairs",
            "tests", "states", "hazards")
MANIFEST_KEYS = ("pack", "title", "version", "builds_on", "notice", "unknown_prior", "leak",
                 "description", "device")


def pack_schema() -> dict[str, Any]:
    """The JSON Schema (draft 2020-12) of one pack file."""
    return PACK_FILE_SCHEMA
