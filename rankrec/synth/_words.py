"""Word lists for the invented organisation: spaces, title words, teams, groups, agents.

Everything here is made up. Topic words are disjoint between spaces, so page titles
(topic + qualifier + kind, optionally after a project code name) are unique across
the wiki without a lookup.
"""

from __future__ import annotations

ORGANISATION = "Tarnwick Instruments"
WIKI_HOST = "wiki.tarnwick.invalid"  # .invalid is reserved by RFC 2606

# fmt: off
# Spaces in the order they appear as the wiki grows (small wikis use the first few).
SPACE_TOPICS: dict[str, tuple[str, ...]] = {
    "engineering": ("build", "compiler", "firmware", "sensor", "calibration", "telemetry", "release",
                    "codebase", "testbench", "signal", "driver", "bootloader", "simulation", "toolchain"),
    "ops": ("incident", "deployment", "monitoring", "backup", "network", "capacity", "storage", "patching",
            "failover", "alerting", "uptime", "provisioning", "on-call", "datacentre"),
    "sales": ("pricing", "quota", "territory", "prospect", "renewal", "discount", "proposal", "tender",
              "distributor", "channel", "deal", "lead", "upsell", "account"),
    "people": ("onboarding", "hiring", "interview", "leave", "benefits", "mentoring", "appraisal",
               "relocation", "wellbeing", "training", "offboarding", "referral", "promotion", "Übergabe"),
    "finance": ("budget", "invoice", "expense", "payroll", "audit", "forecast", "ledger", "procurement",
                "treasury", "tax", "reimbursement", "accrual", "revenue", "capex"),
    "design": ("typography", "palette", "iconography", "wireframe", "accessibility", "layout", "usability",
               "illustration", "component", "motion", "styleguide", "Façade", "mockup", "grid"),
    "security": ("phishing", "encryption", "vulnerability", "firewall", "password", "certificate",
                 "threat", "penetration", "secrets", "badge", "clearance", "hardening", "forensics",
                 "access"),
    "research": ("optics", "spectrometer", "photonics", "metrology", "laser", "interferometer", "patent",
                 "lab", "experiment", "dataset", "coating", "lens", "detector", "Réseau"),
    "support": ("ticket", "warranty", "repair", "escalation", "returns", "helpdesk", "troubleshooting",
                "spares", "customer", "servicing", "diagnostics", "firmware-update", "hotline", "loaner"),
    "legal": ("contract", "compliance", "licensing", "privacy", "litigation", "confidentiality",
              "regulation", "export", "liability", "dispute", "retention", "signatory", "counsel",
              "trademark"),
    "marketing": ("campaign", "newsletter", "webinar", "tradeshow", "brochure", "press", "messaging",
                  "launch", "sponsorship", "website", "social", "events", "brand", "case-study"),
    "data": ("warehouse", "dashboard", "metrics", "ingestion", "schema", "reporting", "analytics",
             "model", "notebook", "lineage", "pipeline", "catalogue", "sampling", "anomaly"),
    "platform": ("cluster", "container", "gateway", "endpoint", "identity", "queue", "cache", "registry",
                 "runtime", "mesh", "observability", "toolkit", "scheduler", "secrets-store"),
    "facilities": ("office", "parking", "café", "cleaning", "furniture", "heating", "lighting", "visitor",
                   "mailroom", "reception", "lease", "move", "floorplan", "workshop"),
    "product": ("roadmap", "requirements", "feature", "persona", "feedback", "backlog", "discovery",
                "changelog", "beta", "specification", "vision", "pricing-model", "launch-plan", "milestone"),
    "quality": ("inspection", "tolerance", "defect", "nonconformance", "certification", "gauge",
                "supplier", "traceability", "rework", "yield", "batch", "deviation", "corrective",
                "sign-off"),
}
SPACES: tuple[str, ...] = tuple(SPACE_TOPICS)

QUALIFIERS: tuple[str, ...] = (
    "quarterly", "weekly", "legacy", "regional", "internal", "remote", "annual", "emergency", "standard",
    "advanced", "basic", "shared", "cross-site", "pilot", "interim", "northern", "southern", "night",
    "spring", "autumn", "manual", "automated", "minimal", "extended", "secondary", "primary", "field",
    "bench", "offline", "live", "draft", "revised", "lightweight", "detailed", "common", "local",
    "global", "temporary", "long-term", "new",
)
KINDS: tuple[str, ...] = (
    "overview", "guide", "checklist", "runbook", "policy", "faq", "handbook", "notes", "plan", "review",
    "report", "template", "glossary", "howto", "playbook", "retrospective", "proposal-draft", "schedule",
    "matrix", "procedure", "primer", "cheatsheet", "charter", "timeline", "index",
)
SUBFOLDER_KINDS: dict[str, str] = {"runbook": "runbooks", "retrospective": "retros"}

CODENAMES: tuple[str, ...] = (
    "kestrel", "larch", "mistral", "orrery", "quartz", "saffron", "tamarind", "umber", "vellum", "wren",
    "alder", "basalt", "cinder", "dunlin", "ember", "fennel", "garnet", "heron", "indigo", "juniper",
    "kelp", "lichen", "marram", "nettle", "osprey", "plover", "quince", "rowan", "sorrel", "teasel",
    "ursa", "vetch", "willow", "yarrow", "zephyr", "aster", "bramble", "corvid", "damson", "egret",
    "fulmar", "gorse", "hazel", "iris", "jackdaw", "knot", "linnet", "merlin", "nimbus", "oriel",
    "petrel", "quail", "redpoll", "siskin", "tern", "upland", "vireo", "wigeon", "xeric", "yew",
)

EXTRA_TAGS: tuple[str, ...] = ("onboarding", "how-to", "reference", "policy", "decision", "meeting")

# Access groups and the space whose restricted pages they guard ("" = any space).
GROUP_SPACES: dict[str, str] = {
    "finance-staff": "finance",
    "people-partners": "people",
    "security": "security",
    "legal-counsel": "legal",
    "leadership": "",
}

# Team names per home space; more teams than listed get numbered names.
SPACE_TEAMS: dict[str, tuple[str, ...]] = {
    "engineering": ("build-systems", "firmware-crew", "test-rigs"),
    "ops": ("site-reliability", "night-shift"),
    "sales": ("field-sales", "partner-desk"),
    "people": ("talent", "people-ops"),
    "finance": ("accounting", "treasury-desk"),
    "design": ("product-design", "studio"),
    "security": ("secops",),
    "research": ("optics-lab", "metrology-lab"),
    "support": ("service-desk", "field-service"),
    "legal": ("counsel",),
    "marketing": ("brand-studio", "events-crew"),
    "data": ("analytics", "data-plumbing"),
    "platform": ("platform-core", "developer-tools"),
    "facilities": ("workplace",),
    "product": ("product-office",),
    "quality": ("quality-assurance", "supplier-quality"),
}

# Browser user agents of our own invention (the leading "Mozilla/5.0" is the usual token).
BROWSER_AGENTS: tuple[str, ...] = (
    "Mozilla/5.0 (Workstation; rv:128.0) Larkspur/128.0",
    "Mozilla/5.0 (Laptop; U; en-GB) Fernway/17.4 Safeview/605",
    "Mozilla/5.0 (Tablet; rv:121.0) Larkspur/121.0 Mobile",
    "Mozilla/5.0 (Desktop; Win64; x64) Quillon/124.0.6367",
)
CRAWLER_AGENTS: tuple[str, ...] = (
    "IndexerBot/2.1 (+https://crawler.invalid/about)",
    "link-check-spider/0.9",
    "uptime-monitoring-probe/3.2",
    "python-requests/2.31",
    "HeadlessRenderer/1.0",
)
ASSET_PATHS: tuple[str, ...] = (
    "/static/wiki.css", "/static/wiki.js", "/static/logo.svg", "/static/favicon.ico",
    "/static/fonts/body.woff2", "/static/img/banner.png", "/static/wiki.js.map", "/static/img/avatar.webp",
)
# fmt: on

SHOWN_WORDS: dict[str, str] = {"faq": "FAQ", "howto": "How-to", "on-call": "On-call"}


def shown(word: str) -> str:
    """How a word appears in a title: ``"cross-site"`` -> ``"Cross-Site"``."""
    if word in SHOWN_WORDS:
        return SHOWN_WORDS[word]
    return "-".join(part[:1].upper() + part[1:] for part in word.split("-"))
