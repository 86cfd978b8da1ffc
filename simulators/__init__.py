"""fringecal simulators: the physics of a split-screen calibration bench, from gray levels to camera counts."""
