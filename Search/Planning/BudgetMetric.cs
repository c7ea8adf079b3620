namespace Bitbudget.Search.Planning;

/// <summary>The metric an error budget is stated on.</summary>
public enum BudgetMetric
{
    /// <summary>Output SQNR in dB; budget is a lower bound.</summary>
    Sqnr,

    /// <summary>Relative MSE of the outputs; budget is an upper bound.</summary>
    RelativeMse,

    /// <summary>Top-1 agreement with the FP32 model, 0..1; budget is a lower bound.</summary>
    Top1Agreement,

    /// <summary>KL divergence of softmax outputs in nats; budget is an upper bound.</summary>
    KlDivergence,

    /// <summary>Cosine similarity of outputs; budget is a lower bound.</summary>
    CosineSimilarity,

    /// <summary>Accuracy drop against labels in percentage points; budget is an upper bound.</summary>
    AccuracyDrop,
}
