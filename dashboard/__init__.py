"""Page sections of the Fitladder dashboard (they may import Streamlit; the engine does not)."""
