"""Small readers of engine results shared by the physics tests."""


def nominal(result, name):
    return float(result.outputs[name]["value"][0])


def sigma(result, name):
    return float(result.outputs[name]["sigma"][0])


def codes(result):
    return {x.code for x in result.warnings}
