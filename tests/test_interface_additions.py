"""Everything offwatch publishes is either fixed by the interface or listed in the README's table of
additions, so a display's author can rely on one or read about the other.

Outside reference: ``../shared/design/interface.md`` (the interface offwatch keeps: topics, payload
fields, event kinds, alert ids). The README's table sits between ``interface-additions`` markers.
"""

from __future__ import annotations

import re
from collections import defaultdict

from tests.shared import REPO, shared_path

BACKTICKED = re.compile(r"`([^`]+)`")


def _without_parentheses(text: str) -> str:
    """``a (b (c)) d`` -> ``a  d``: the interface explains values in parentheses, fields stand outside."""
    out, depth = [], 0
    for ch in text:
        depth += ch == "("
        if depth == 0:
            out.append(ch)
        depth -= ch == ")" and depth > 0
    return "".join(out)


def interface_fields() -> tuple[dict[str, set[str]], set[str]]:
    """``({topic: payload fields}, alert ids)`` as interface.md fixes them."""
    text = shared_path("design", "interface.md").read_text(encoding="utf-8")
    fields: dict[str, set[str]] = defaultdict(set)
    for row in re.findall(r"^\| `offwatch/([^`]+)` \|[^|]*\|(.*)\|\s*$", text, flags=re.M):
        topic, cells = row
        fields[topic.split("/<", 1)[0]] |= set(BACKTICKED.findall(_without_parentheses(cells)))
    kinds = re.search(r"Event kinds \(at least\):(.*?)\n\n", text, flags=re.S)
    fields["events"] |= set(BACKTICKED.findall(_without_parentheses(kinds.group(1))))
    ids = re.search(r"Alert ids \(at least\):(.*?)\n\n", text, flags=re.S)
    return fields, set(BACKTICKED.findall(ids.group(1)))


def readme_additions() -> dict[str, set[str]]:
    """``{topic: fields}`` from the README's table of additions (first backticked name is the topic)."""
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    block = readme.split("<!-- interface-additions:start -->", 1)[1].split("<!-- interface-additions:end -->", 1)[0]
    added: dict[str, set[str]] = {}
    for line in block.splitlines():
        cells = line.split("|")
        if len(cells) < 4 or not BACKTICKED.search(cells[1]):
            continue
        topic = BACKTICKED.findall(cells[1])[0].split("/<", 1)[0]
        added[topic] = set(BACKTICKED.findall(_without_parentheses(cells[2])))
    return added


def readme_alert_ids() -> set[str]:
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    return set(re.findall(r"^\| `([a-z_]+)` \| (?:alarm|warning|caution)", readme, flags=re.M))


def published_fields(messages) -> tuple[dict[str, set[str]], set[str]]:
    seen: dict[str, set[str]] = defaultdict(set)
    ids: set[str] = set()
    for msg in messages:
        topic = msg.topic.split("/", 1)[1]
        if topic.startswith("alerts/"):
            ids.add(topic.split("/", 1)[1])
            topic = "alerts"
        seen[topic] |= set(msg.payload)
    return seen, ids


def test_the_interface_is_read_as_it_is_written():
    # GIVEN interface.md WHEN read THEN its own examples come out (a parser that finds nothing passes all)
    fields, ids = interface_fields()
    assert {"set_deg", "drift_kn", "quality", "stw_scale"} <= fields["current"]
    assert "converging" not in fields["current"]  # a value in parentheses, not a field
    assert {"delta_c", "warmer", "kind"} <= fields["events"]
    assert {"pressure_fall", "unstable_air", "gnss_lost"} <= ids


def test_every_field_the_demo_publishes_is_in_the_interface_or_the_readme(demo_replay):
    fields, _ = interface_fields()
    added = readme_additions()
    seen, _ = published_fields(demo_replay.messages)
    # every payload carries time (interface.md, "Units and conventions")
    unlisted = {topic: sorted(names - {"time"} - fields.get(topic, set()) - added.get(topic, set()))
                for topic, names in seen.items()}
    assert {t: n for t, n in unlisted.items() if n} == {}, "add them to the README's table of additions"


def test_the_readme_lists_no_field_the_interface_has():
    fields, _ = interface_fields()
    for topic, names in readme_additions().items():
        assert not names & fields.get(topic, set()), f"{topic}: already in the interface"


def test_every_alert_id_raised_on_the_demo_is_in_the_readme(demo_replay):
    _, interface_ids = interface_fields()
    _, ids = published_fields(demo_replay.messages)
    assert ids, "the demo raises alerts"
    assert ids <= readme_alert_ids()
    assert interface_ids <= readme_alert_ids()
