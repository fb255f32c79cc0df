"""The invented demo campaign TILT-26 of the invented Tessellate group.

``scenario`` holds the people, compounds, batches and the physics behind every file;
``instruments`` turns them into instrument files with ``server.synth``; ``load`` posts it all
through the JSON API (``remanence demo``); ``make_examples`` writes seed_demo/examples/.
"""
