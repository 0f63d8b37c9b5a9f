"""What one run computes per hypothesis, from the counts: the test, estimate and margins
(``hypotheses``), the plan's decision rule (``decision``), families of hypotheses, interim
looks, sensitivity analyses, and the results document they make up (``results``)."""
