"""When the map is drawn again (app/callbacks.py draw_map), called as Dash calls it.

Dash's own recipe for unit-testing a callback: run it in a copied context with
``dash._callback_context.context_value`` set to the inputs that fired (Dash documentation,
"Unit testing callbacks").  Choosing a region clears the region message; that alone must not
rebuild the map (140 KB on the path from a region change to its budget), while a message that
says a drawing was refused must (the refused shape is wiped off the map).
"""

from contextvars import copy_context

import pytest
from dash._callback_context import context_value
from dash._utils import AttributeDict
from dash.exceptions import PreventUpdate


@pytest.fixture(scope="module")
def dashboard(tmp_path_factory):
    from app import server, state

    server.create_app(cache_dir=tmp_path_factory.mktemp("map-cache"))
    state.current().fields("0")
    yield
    state.current().shutdown()


def _draw(fired: list[str], message: str):
    from app.callbacks import draw_map

    def run():
        context_value.set(AttributeDict(triggered_inputs=[{"prop_id": p, "value": None} for p in fired]))
        return draw_map("0", "ivt", 0, ["on"], [], None, [], "drawrect", message)

    return copy_context().run(run)


def test_a_cleared_message_alone_does_not_redraw_the_map(dashboard):
    with pytest.raises(PreventUpdate):
        _draw(["region-message.children"], "")


def test_a_refusal_message_or_a_region_change_redraws_it(dashboard):
    fig, label = _draw(["region-message.children"], "The outline crosses itself at vertex 3.")
    assert fig.data and "step 1 of" in label
    fig, _ = _draw(["regions.data", "region-select.value", "region-message.children"], "")
    assert fig.data
