"""The cautions shown on every page of the app and printed in every memo (one wording)."""

SHORT = ("Decision support for qualified reviewers, not a medical device and no credit decision: "
         "validate locally and follow your governance before any use.")

FULL = (
    "Fulcrum is decision support for qualified reviewers; it is not itself a medical device and "
    "makes no credit decision. Validate on local data, follow local clinical governance or "
    "model-risk policy and the applicable regulation, and have a licensed clinician or "
    "accountable officer sign off. A score that drives a clinical alarm may itself be a regulated "
    "device function, and credit scoring a high-risk use under applicable law: state that status "
    "for this use rather than assuming it."
)

LABEL_SHIFT = (
    "Deployment figures assume label shift: sensitivity and the false-positive rate measured here "
    "carry over to the deployment population, while precision, NPV, flag rate, cost and net "
    "benefit are recomputed at the deployment prevalence. If the case mix changes in other ways, "
    "these figures do not hold."
)

FEW_EVENTS = (
    "Fewer than 100 events: validation studies want at least 100 (Collins et al., Stat Med 2016). "
    "Every interval is wide and a threshold chosen on these cases may not transfer."
)

ACCURACY_TRAP = (
    "Accuracy misleads when events are rare: flagging nobody is right for every non-event. "
    "Compare it with the accuracy of flagging none."
)
