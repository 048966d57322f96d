"""The live tuning page behind ``crtfilter tune``: a local server, a page, and what they share.

    controls.py   every preset setting as a control: its group (the preset table), kind,
                  allowed range or choices (from the validation the preset loader uses);
                  values to a validated preset; a preset file of only the differences
    session.py    one image and a starting preset: views of rows of the render (the fast
                  path's bands alone), the whole frame's figures, the mask cell and the
                  curves; newest-only queues that drop what a newer request replaced
    server.py     the standard library's HTTP server on 127.0.0.1: a random token, the
                  Host and Origin checks, the routes, saving
    page/         the page itself: HTML, CSS and JavaScript, nothing fetched from elsewhere
"""
