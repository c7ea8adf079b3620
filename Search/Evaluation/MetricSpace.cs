namespace Bitbudget.Search.Evaluation;

/// <summary>Where SQNR and relative MSE of an output are computed.</summary>
public enum MetricSpace
{
    /// <summary>On the output values as the model returns them.</summary>
    Linear,

    /// <summary>
    /// Outputs that are probabilities (every reference value in [0, 1]) are compared as logits: a sigmoid
    /// output as log(p / (1 - p)), a softmax output (rows summing to 1) as log p minus its row mean, with p
    /// clamped to [<see cref="OutputComparer.LogitEpsilon"/>, 1 - eps] first. Near 0 and 1 a tiny absolute
    /// change is a large relative one, so linear SQNR of such outputs swings with a handful of values;
    /// logits spread those values out. Other outputs stay linear.
    /// </summary>
    Logit,
}
