"""Colours and plot defaults of the dashboard (one calm palette, used everywhere)."""

INK = "#24506a"        # data lines, header
CLAY = "#c0663f"       # the suggested / chosen value, the data's statistic
SAGE = "#7a9e7e"       # second curve of a pair
SAND = "#e6d6a8"       # shaded ranges (scaling range, fit range)
MIST = "#f4f6f5"       # page background
SLATE = "#5b6770"      # secondary text, grey curves
ALERT = "#a23b2a"      # refusals and errors

# Curves for increasing embedding dimension: light to dark along one hue.
DIMENSION_RAMP = ["#b7cfdc", "#9bbdd0", "#7faac2", "#6497b3", "#4b84a3", "#357190",
                  "#255e7c", "#1b4c66", "#133b50", "#0c2b3b"]



def _scroll_moves_the_page(plot, element) -> None:
    """Leave the mouse wheel to the page: zoom only after the user picks the wheel-zoom tool."""
    plot.state.toolbar.active_scroll = None


WHEEL_OFF = [_scroll_moves_the_page]
PLOT = dict(responsive=True, height=280, toolbar="right", fontscale=1.0, show_grid=True, hooks=WHEEL_OFF)


def dimension_colour(i: int, n: int) -> str:
    """Colour of the i-th of n dimension curves (darker = higher dimension)."""
    if n <= 1:
        return INK
    k = round(i * (len(DIMENSION_RAMP) - 1) / (n - 1))
    return DIMENSION_RAMP[k]
