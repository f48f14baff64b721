"""The simulated bench: a behavioural mixer model behind real SCPI sockets."""
