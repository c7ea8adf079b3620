namespace Bitbudget.Search.Evaluation;

/// <summary>How far one model output moved between two runs over the calibration set.</summary>
/// <param name="Output">The output's name.</param>
/// <param name="RelativeDifference">||after - before|| / ||before|| over the whole output (L2 norms; the square root of the relative MSE the SQNR is built on); 0 when bit for bit equal.</param>
/// <param name="MaxRelativeDifference">Largest single |after - before| divided by the largest |before|.</param>
/// <param name="BitExact">True when every value is bit for bit the same.</param>
public sealed record OutputDifference(string Output, double RelativeDifference, double MaxRelativeDifference, bool BitExact);
