"""The live composer: a local web page that previews a scene as its values change."""
