namespace Bitbudget.Service.Demo;

/// <summary>Mean cross-entropy and accuracy of one pass over the training set, measured on the mini-batches as they were trained (BN in training mode).</summary>
internal sealed record TrainingEpoch(int Epoch, double Loss, double Accuracy);
