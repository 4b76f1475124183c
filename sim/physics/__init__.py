"""The physics of the coupled world: plant, sensors, actuators, the wearer's motor and intent."""
