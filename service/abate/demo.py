"""Loading the invented demo scenario through the same domain functions the API uses."""

from abate.domain import modes, scales, studies
from abate.models import Study

DEMO_ACTOR = "demo loader"
DEMO_SOURCE = "demo"


def load_scenario(scenario):
    """Create each study of the scenario that is not there yet; return (loaded, skipped) titles."""
    loaded, skipped = [], []
    for spec in scenario["studies"]:
        if Study.select().where(Study.title == spec["title"]).exists():
            skipped.append(spec["title"])
            continue
        scale_set = scales.find_scale_set_by_name(spec["scale"])
        fields = {key: value for key, value in spec.items() if key not in ("scale", "modes")}
        study = studies.create_study({**fields, "scale_id": scale_set.id})
        for mode_spec in spec["modes"]:
            later = mode_spec.get("rerated", [])
            mode = modes.create_mode(
                study.id,
                {key: value for key, value in mode_spec.items() if key != "rerated"},
                actor=DEMO_ACTOR,
                source=DEMO_SOURCE,
            )
            for change in later:
                mode = modes.update_mode(mode.id, change, actor=DEMO_ACTOR, source=DEMO_SOURCE)
        loaded.append(spec["title"])
    return loaded, skipped
