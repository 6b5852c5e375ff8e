"""The dashboard's pages, in menu order: one table for the navigation (dashboard.py) and the start page.

Each entry: URL path → (page file relative to dashboard.py, icon, title, what the page does).
The URL paths are the contract of shared links and bookmarks (see filmcalc.links.PAGES).
"""

START = ("start", "filmcalc/ui/start.py", ":material/home:", "Start")

PAGES = {
    "film-spectrum": ("filmcalc/ui/film_spectrum.py", ":material/show_chart:", "Film spectrum",
                      "reflectance and colour of one film thickness"),
    "colour-charts": ("filmcalc/ui/colour_charts.py", ":material/palette:", "Colour charts",
                      "colour over thickness and angle, a chart to print, a colour's candidate thicknesses"),
    "photo-map": ("filmcalc/ui/photo_map.py", ":material/image:", "Thickness from a photo",
                  "a photo of interference colours becomes a thickness map with uncertainty and flags"),
    "spectrum-fit": ("filmcalc/ui/spectrum_fit.py", ":material/ssid_chart:", "Spectrum fit",
                     "a reflectance spectrum gives the thickness ± 1σ and any other thickness that fits"),
    "spectrum-map": ("filmcalc/ui/spectrum_map.py", ":material/grid_on:", "Map of spectra",
                     "a mapping run of spectra becomes a thickness map with uniformity figures"),
    "fringes": ("filmcalc/ui/fringe_analysis.py", ":material/waves:", "Fringes",
                "a photo under one or two lines of light gives thickness along a line or over the image"),
    "film-over-time": ("filmcalc/ui/film_sequence.py", ":material/movie:", "Film over time",
                       "a recording becomes thickness over time, a thinning law and the rupture"),
    "saved-runs": ("filmcalc/ui/saved_runs.py", ":material/bookmarks:", "Saved runs",
                   "open a saved analysis again, compare runs, follow a sample over time"),
    "stack-builder": ("filmcalc/ui/stack_builder.py", ":material/layers:", "Stack builder",
                      "describe your own sample (materials, layers, light) and save its stack file"),
    "cautions": ("filmcalc/ui/safety.py", ":material/health_and_safety:", "Cautions",
                 "what the numbers mean, and safety in the lab"),
}
