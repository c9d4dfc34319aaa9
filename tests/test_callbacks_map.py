"""When the map is drawn again (app/callbacks.py draw_map, app/regions.py drawn_on_map).

The map listens to the region list, the chosen region, the clicked vertices and a stamp that
app/regions.py sets only when a drawing on the map was refused (the drawn shape must be wiped
off). It does not listen to the region message, which every region change rewrites: a second
map request for one change would cost a 140 KB figure on the path from the change to its
budget, and Dash keeps only the answer of the later request.
"""

import pytest
from dash import no_update


@pytest.fixture(scope="module")
def dashboard(tmp_path_factory):
    from app import server, state

    server.create_app(cache_dir=tmp_path_factory.mktemp("map-cache"))
    state.current().fields("0")
    yield
    state.current().shutdown()


def test_a_refused_drawing_is_stamped_and_an_accepted_one_is_not(dashboard):
    from app.regions import drawn_on_map

    flat = {"shapes": [{"type": "rect", "x0": 2.0, "x1": 2.0, "y0": 41.0, "y1": 48.0}]}
    answer = drawn_on_map(flat, [])
    assert answer["regions"] is no_update and "error" in answer["message_class"]
    assert isinstance(answer["refused"], float)
    box = {"shapes": [{"type": "rect", "x0": 2.0, "x1": 12.0, "y0": 41.0, "y1": 48.0}]}
    answer = drawn_on_map(box, [])
    assert [r["name"] for r in answer["regions"]] == ["Box 1"] and answer["refused"] is no_update


def test_the_map_is_drawn_with_the_chosen_region_on_top(dashboard):
    from app.callbacks import draw_map
    from app.regions import drawn_on_map

    box = {"shapes": [{"type": "rect", "x0": 2.0, "x1": 12.0, "y0": 41.0, "y1": 48.0}]}
    regions = drawn_on_map(box, [])["regions"]
    fig, label = draw_map("0", "ivt", 0, ["on"], regions, regions[0]["id"], [], "drawrect", None)
    active = [t for t in fig.data if t.name == "region: Box 1" and t.mode == "lines+markers"]
    assert active and min(active[0].x) == 2.0 and max(active[0].y) == 48.0
    assert "step 1 of" in label
