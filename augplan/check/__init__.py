"""The label-safety check (`augplan check`): does an op move an image out of its class?"""
